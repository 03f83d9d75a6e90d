"""The stylesheet's colour pairs meet WCAG 2.2 contrast minimums.

Relative luminance and contrast ratio as defined in WCAG 2.2 (W3C Recommendation, 2023), terms
"relative luminance" and "contrast ratio"; 4.5:1 for text (success criterion 1.4.3) and 3:1 for
focus indicators and other non-text parts (1.4.11).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

CSS = Path(__file__).resolve().parents[2] / "static" / "beamledger.css"


def _variables() -> dict[str, str]:
    root = re.search(r":root\s*{(.*?)}", CSS.read_text(), re.S).group(1)
    return dict(re.findall(r"--([\w-]+):\s*(#[0-9a-fA-F]{6})", root))


def _luminance(hex_colour: str) -> float:
    channels = [int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def contrast(a: str, b: str) -> float:
    high, low = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def test_the_formula_against_known_values():
    # Black on white is 21:1 and a colour on itself 1:1 (WCAG 2.2 definition of contrast ratio).
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast("#777777", "#777777") == pytest.approx(1.0)
    # #767676 on white is the commonly quoted lightest grey that passes 4.5:1 (from memory).
    assert contrast("#767676", "#ffffff") == pytest.approx(4.54, abs=0.01)


TEXT_PAIRS = [
    ("ink", "paper"),
    ("ink", "panel"),
    ("ink-soft", "paper"),
    ("ink-soft", "panel"),
    ("warn-ink", "warn-bg"),
    ("bad-ink", "bad-bg"),
    ("ok-ink", "ok-bg"),
    ("info-ink", "info-bg"),
    ("ink", "mine"),
    ("ink", "taken"),
    ("ink", "past"),
]
WHITE_ON = ["bar", "go", "go-dark", "stop"]


@pytest.mark.parametrize(("fg", "bg"), TEXT_PAIRS)
def test_text_colours(fg, bg):
    colours = _variables()
    assert contrast(colours[fg], colours[bg]) >= 4.5


@pytest.mark.parametrize("bg", WHITE_ON)
def test_white_text_on_dark_surfaces(bg):
    assert contrast("#ffffff", _variables()[bg]) >= 4.5


def test_links_and_focus_ring():
    colours = _variables()
    link = re.search(r"^a \{ color: (#[0-9a-fA-F]{6})", CSS.read_text(), re.M).group(1)
    assert contrast(link, colours["paper"]) >= 4.5
    # The ring is dark on light pages and sits in a yellow halo that shows on the dark bar.
    assert contrast(colours["focus-out"], colours["paper"]) >= 3
    assert contrast(colours["focus-halo"], colours["bar"]) >= 3
    assert contrast(colours["focus-halo"], colours["focus-out"]) >= 3
