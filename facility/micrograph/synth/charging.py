"""Charging artefacts for the synthetic micrographs, at graded strength.

Each artefact acts on the noise-free expected signal (electrons per pixel, already blurred by the
probe) before counting noise, the way the real effects act on the detected signal while the beam
scans: rows are fast-scan lines and time runs along a row (x increasing) and then down the frame.
What the artefacts look like follows the usual description of charging in SEM practice (see
``DOMAIN.md``, "What charging looks like in a raster image"); the shapes and numbers are our own
choices, drawn at random from ranges that look like charged micrographs.

Kinds (``ChargingSpec.kinds``):

``clipped``
    bright patches on charged (bright) features that saturate the detector, smeared downstream
    along the scan line, so they clip at the top grey level;
``line_jumps``
    abrupt jumps of whole-line brightness (the collected yield changes as charge builds or
    discharges), relaxing exponentially over the following lines;
``streaks``
    bright or dark streaks on single lines, starting abruptly (often at a bright feature) and
    fading along the line;
``tails``
    bright or dark tails running downstream from charged features along every line that crosses
    them (the detector signal overshoots/undershoots and relaxes with the scan);
``torn_lines``
    lines or short groups of lines torn sideways from some point onwards (the beam is deflected
    by the surface potential);
``shear``
    drift of the field between the top and bottom of the frame, creeping at a varying rate and
    with a few slips;
``nonsense``
    the extreme (mirror-like) case: a band of the frame where lines are replaced by stretched,
    displaced, re-brightened copies of other lines.

``strength`` runs from 0 (no artefact) to 1 (severe); amplitudes, sizes and counts grow with it.
Artefacts below about :data:`VISIBLE_STRENGTH` are faint enough that a person looking at the
image would often not call it charged; the detector's targets are stated for strengths above that.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, signal

KINDS: tuple[str, ...] = (
    "clipped",
    "line_jumps",
    "streaks",
    "tails",
    "torn_lines",
    "shear",
    "nonsense",
)

# Below this strength the artefacts are often too faint for a person to call the image charged
# (our judgement from looking at the generated images; see tests/micrograph/test_charging.py).
VISIBLE_STRENGTH = 0.3


@dataclass(frozen=True)
class ChargingSpec:
    """Which charging artefacts to add and how strongly (0 = none, 1 = severe)."""

    kinds: tuple[str, ...]
    strength: float

    def __post_init__(self) -> None:
        unknown = [k for k in self.kinds if k not in KINDS]
        if unknown:
            raise ValueError(f"unknown charging kinds {unknown}; choose from {list(KINDS)}")
        if not 0.0 <= float(self.strength) <= 1.0:
            raise ValueError("strength must lie in [0, 1]")


def apply_charging(
    signal_e: np.ndarray, spec: ChargingSpec, rng: np.random.Generator, full_scale: float
) -> np.ndarray:
    """Return a copy of the expected signal with the requested charging artefacts.

    ``signal_e`` is the noise-free expected signal (electrons per pixel), ``full_scale`` the
    signal that reaches the top grey level of the detector. The kinds are applied in the order of
    :data:`KINDS` (geometric distortions last but one, so that they move the brightness artefacts
    too, as the deflected beam would; nonsense last). ``rng`` makes it reproducible.
    """
    out = np.array(signal_e, dtype=np.float64, copy=True)
    s = float(spec.strength)
    if s <= 0.0 or not spec.kinds:
        return out
    for kind in KINDS:
        if kind in spec.kinds:
            out = _ARTEFACTS[kind](out, s, rng, float(full_scale))
            np.maximum(out, 0.0, out=out)
    return out


def _otsu(values: np.ndarray) -> float:
    """Otsu's threshold (Otsu 1979: maximum between-class variance), 128-bin histogram."""
    hist, edges = np.histogram(values, bins=128)
    centres = 0.5 * (edges[:-1] + edges[1:])
    w = np.cumsum(hist).astype(np.float64)
    m = np.cumsum(hist * centres)
    between = (m[-1] * w - m * w[-1]) ** 2 / (w * (w[-1] - w) + 1e-12)
    return float(centres[np.argmax(between[:-1])])


def _bright_seeds(sig: np.ndarray, rng: np.random.Generator, n: int, q: float = 0.97) -> np.ndarray:
    """Pick ``n`` (y, x) positions on bright features: charging starts on the bright insulators."""
    ys, xs = np.nonzero(sig >= np.quantile(sig, q))
    if ys.size == 0:
        ys, xs = np.nonzero(np.ones_like(sig, dtype=bool))
    idx = rng.integers(0, ys.size, size=n)
    return np.stack([ys[idx], xs[idx]], axis=1)


def _clipped(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny, nx = sig.shape
    n = 1 + int(round(3 * s))
    yy = np.arange(ny, dtype=np.float64)[:, None]
    xx = np.arange(nx, dtype=np.float64)[None, :]
    level = fs * (1.0 + 0.5 * s)
    patch = np.zeros_like(sig)
    length = 0.0
    for y0, x0 in _bright_seeds(sig, rng, n):
        ry = (2.0 + 0.05 * ny * s) * rng.uniform(0.7, 1.3)
        rx = ry * rng.uniform(1.2, 2.5)
        length = max(length, rx * rng.uniform(0.5, 1.5))
        rho = np.sqrt(((xx - x0 - 0.5 * rx) / rx) ** 2 + ((yy - y0) / ry) ** 2)
        np.maximum(patch, np.clip((1.2 - rho) / 0.4, 0.0, 1.0), out=patch)
    # the overshoot relaxes downstream: each patch is smeared along the scan like a comet
    alpha = math.exp(-1.0 / length)
    smear = signal.lfilter([0.0, 1.0 - alpha], [1.0, -alpha], patch, axis=1)
    np.maximum(patch, np.minimum(3.0 * smear, 1.0), out=patch)
    return sig + patch * np.maximum(level - sig, 0.0)


def _line_jumps(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny, _ = sig.shape
    n = 1 + int(round(4 * s))
    yy = np.arange(ny, dtype=np.float64)
    gain = np.ones(ny)
    for y0 in rng.integers(int(0.05 * ny), int(0.95 * ny), size=n):
        amp = (0.01 + 0.3 * s) * rng.uniform(0.6, 1.4) * (1 if rng.random() < 0.7 else -1)
        tau = rng.uniform(3.0, 40.0)
        after = yy >= y0
        gain[after] += amp * np.exp(-(yy[after] - y0) / tau)
    return sig * np.maximum(gain, 0.2)[:, None]


def _streaks(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny, nx = sig.shape
    n = max(1, int(round(ny * (0.005 + 0.05 * s))))
    mean = float(sig.mean())
    xx = np.arange(nx, dtype=np.float64)
    out = sig.copy()
    for y0, x0 in _bright_seeds(sig, rng, n, q=0.9):
        length = nx * rng.uniform(0.1, 0.5) * (0.4 + s)
        amp = (0.05 + 0.8 * s) * mean * rng.uniform(0.5, 1.5)
        amp *= 1 if rng.random() < 0.7 else -1
        out[y0] += amp * np.where(xx >= x0, np.exp(-(xx - x0) / length), 0.0)
    return out


def _tails(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    nx = sig.shape[1]
    # bright features against the background by Otsu's threshold; a random share of them charge
    thr = _otsu(sig[::2, ::2])
    dark = sig <= thr
    lo = float(sig[dark].mean()) if dark.any() else float(sig.min())
    hi = float(sig[~dark].mean()) if (~dark).any() else float(sig.max())
    contrast = max(hi - lo, 1e-9)
    bright = ~dark
    if bright.mean() > 0.5:
        # the bright phase is the matrix (a porous surface, a dense mat): its brightest parts
        # (rims and edges) are what charges
        bright = sig > np.quantile(sig, 0.95)
    labels, n = ndimage.label(bright)
    if n == 0:
        return sig
    # a random share of the features charge, and always the largest one
    sizes = np.bincount(labels.ravel(), minlength=n + 1)
    sizes[0] = 0
    charged = rng.random(n + 1) < (0.3 + 0.7 * s)
    charged[0] = False
    charged[int(np.argmax(sizes))] = True
    excess = np.where(charged[labels], np.clip((sig - lo) / contrast, 0.0, 1.5), 0.0)
    # the detector signal relaxes after a charged feature like a peak hold with exponential
    # decay: the tail starts where the feature ends and fades downstream along the line
    length = (3.0 + 40.0 * s) * rng.uniform(0.7, 1.3)
    alpha = math.exp(-1.0 / length)
    held = np.zeros_like(excess)
    for x in range(1, nx):
        np.maximum(excess[:, x - 1], alpha * held[:, x - 1], out=held[:, x])
    tail = np.maximum(held - excess, 0.0) * contrast
    amp = (0.1 + 0.9 * s) * rng.uniform(0.7, 1.3)
    if rng.random() < 0.7:
        return sig + amp * tail
    return np.maximum(sig - amp * tail, 0.1 * sig)


def _shift_rows(sig: np.ndarray, rows: np.ndarray, shifts: np.ndarray, x0: np.ndarray) -> None:
    """Move the content of ``rows`` right by ``shifts`` px from column ``x0`` on (in place)."""
    nx = sig.shape[1]
    xx = np.arange(nx, dtype=np.float64)
    for r, d, start in zip(rows, shifts, x0, strict=True):
        src = np.clip(xx - d, 0.0, nx - 1.0)
        moved = np.interp(src, xx, sig[r])
        sig[r, int(start) :] = moved[int(start) :]


def _torn_lines(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny = sig.shape[0]
    out = sig.copy()
    n = max(1, int(round(ny * (0.003 + 0.03 * s))))
    for y0, x0 in _bright_seeds(sig, rng, n, q=0.9):
        rows = np.arange(y0, min(ny, y0 + int(rng.integers(1, 4))))
        d = (0.5 + 10.0 * s) * rng.uniform(0.6, 1.4) * rng.choice([-1.0, 1.0])
        start = x0 if rng.random() < 0.6 else 0
        _shift_rows(out, rows, np.full(rows.size, d), np.full(rows.size, start))
    return out


def _shear(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny, nx = sig.shape
    # drift that creeps at a rate varying down the frame (charge builds up unevenly) and slips
    # now and then; total excursion 5–35 % of the width
    knots = rng.uniform(0.0, 1.0, size=5) ** 2
    rate = np.interp(np.linspace(0, 4, ny), np.arange(5), knots)
    drift = np.cumsum(rate)
    drift *= (0.05 + 0.3 * s) * nx / max(drift[-1], 1e-9)
    for y0 in rng.integers(0, ny, size=1 + int(round(4 * s))):
        drift[y0:] += (0.5 + 8.0 * s) * rng.uniform(0.5, 1.5) * rng.choice([-1.0, 1.0])
    drift *= rng.choice([-1.0, 1.0])
    drift -= drift[ny // 2]
    out = np.empty_like(sig)
    xx = np.arange(nx, dtype=np.float64)
    for r in range(ny):
        # reflect at the frame edges so the shifted-in strip carries specimen-like content
        src = np.abs(xx - drift[r])
        src = np.where(src > nx - 1, 2 * (nx - 1) - src, src)
        out[r] = np.interp(np.clip(src, 0, nx - 1), xx, sig[r])
    return out


def _nonsense(sig: np.ndarray, s: float, rng: np.random.Generator, fs: float) -> np.ndarray:
    ny, nx = sig.shape
    out = sig.copy()
    band = max(4, int(ny * (0.1 + 0.5 * s)))
    y0 = int(rng.integers(0, ny - band + 1))
    xx = np.arange(nx, dtype=np.float64)
    mean = float(sig.mean())
    src_row = float(rng.integers(0, ny))
    shift, gain = 0.0, 1.0
    stretch = rng.uniform(0.4, 2.5)
    for r in range(y0, y0 + band):
        # random walks: which line the beam "sees", where, how bright
        src_row = float(np.clip(src_row + rng.normal(0.0, 3.0), 0, ny - 1))
        shift += rng.normal(0.0, 2.0 + 10.0 * s)
        gain = float(np.clip(gain * math.exp(rng.normal(0.0, 0.05 + 0.15 * s)), 0.3, 2.5))
        if rng.random() < 0.02:
            stretch = rng.uniform(0.4, 2.5)
        src = np.mod((xx - nx / 2) * stretch + nx / 2 + shift, 2 * (nx - 1))
        src = np.where(src > nx - 1, 2 * (nx - 1) - src, src)
        line = np.interp(src, xx, sig[int(src_row)])
        out[r] = gain * line + (gain - 1.0) * 0.3 * mean
    return out


_ARTEFACTS = {
    "clipped": _clipped,
    "line_jumps": _line_jumps,
    "streaks": _streaks,
    "tails": _tails,
    "torn_lines": _torn_lines,
    "shear": _shear,
    "nonsense": _nonsense,
}

__all__ = ["KINDS", "VISIBLE_STRENGTH", "ChargingSpec", "apply_charging"]
