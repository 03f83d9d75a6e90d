"""Default ratings and counting rules by emitter type — placeholders for the facility to replace.

Ratings differ by maker, model and how an instrument is run; the facility sets its own per
instrument (a `Limit`). Until it does, these defaults are shown, always labelled as defaults.
Figures: trade knowledge recalled from memory (DOMAIN.md "Emitters"), not a maker's datasheet.
"""

from __future__ import annotations

from dataclasses import dataclass

from facility.instruments.models import EmitterType

DEFAULT_SOURCE = "default (trade / from memory) — set the rating for this instrument"

# How each counter grows:
#   beam_on  — sum of the sessions' beam-on hours
#   chamber  — sum of session lengths (the chamber is pumped while somebody works)
#   calendar — wall-clock time (parts kept running whether or not anyone is at the instrument)
#   vents    — sum of the sessions' vent cycles
BEAM_ON = "beam_on"
CHAMBER = "chamber"
CALENDAR = "calendar"
VENTS = "vents"


@dataclass(frozen=True)
class EmitterDefault:
    rated_hours: float | None
    basis: str
    note: str


EMITTER_DEFAULTS: dict[str, EmitterDefault] = {
    # "tens to a couple of hundred hours" (DOMAIN.md, trade/memory): the middle of that span.
    EmitterType.TUNGSTEN: EmitterDefault(
        100.0, BEAM_ON, "tungsten hairpin: tens to a couple of hundred hours"
    ),
    # "hundreds to a thousand-plus hours" (DOMAIN.md, trade/memory).
    EmitterType.LAB6: EmitterDefault(1000.0, BEAM_ON, "LaB6: hundreds to a thousand-plus hours"),
    # "continuous, years" (DOMAIN.md, trade/memory): a Schottky source is kept hot day and night,
    # so its wear is calendar time, not the sessions' beam-on time; two years of continuous running.
    EmitterType.SCHOTTKY: EmitterDefault(
        2 * 365 * 24.0, CALENDAR, "Schottky field emission: runs continuously for years"
    ),
    # No figure known to us: the facility must enter the maker's rating.
    EmitterType.COLD_FE: EmitterDefault(
        None, BEAM_ON, "cold field emission: no default, enter the maker's rating"
    ),
}

# Warn at this share of the rating unless the facility sets another (common practice, no source).
DEFAULT_WARN_PERCENT = 80


def emitter_default(emitter_type: str) -> EmitterDefault | None:
    """The default for an emitter type; None for an instrument without an emitter."""
    return EMITTER_DEFAULTS.get(emitter_type)


def emitter_basis(emitter_type: str) -> str:
    default = emitter_default(emitter_type)
    return default.basis if default else BEAM_ON
