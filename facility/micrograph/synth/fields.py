"""Random fields and geometry helpers used to build synthetic specimen scenes.

All fields are noise-free *expected* quantities (electron yield, not counts); photon/electron
noise is added later by the pipeline in :mod:`facility.micrograph.synth`.
"""

from __future__ import annotations

import numpy as np
from scipy import fft


def power_law_field(
    shape: tuple[int, int],
    rng: np.random.Generator,
    *,
    beta: float,
    corr_px: float,
) -> np.ndarray:
    """Zero-mean, unit-variance Gaussian random field with power ∝ (q² + q₀²)^(−β/2).

    A standard spectral synthesis (white noise shaped in Fourier space). ``corr_px`` sets the
    roll-over q₀ = 1/(2π·corr_px): below it the field is white, above it a power law of exponent
    β, which is how rough films and surfaces are usually described (self-affine roughness).
    """
    ny, nx = shape
    fy = fft.fftfreq(ny)[:, None]
    fx = fft.rfftfreq(nx)[None, :]
    q2 = fx * fx + fy * fy
    q0 = 1.0 / (2.0 * np.pi * max(corr_px, 1e-3))
    amp = (q2 + q0 * q0) ** (-beta / 4.0)
    amp[0, 0] = 0.0
    white = rng.standard_normal(shape, dtype=np.float32)
    spec = fft.rfft2(white, workers=1)
    spec *= amp.astype(np.float32)
    field = fft.irfft2(spec, s=shape, workers=1)
    std = float(field.std())
    if std > 0:
        field /= std
    return field.astype(np.float32, copy=False)


def band_field(shape: tuple[int, int], rng: np.random.Generator, *, scale_px: float) -> np.ndarray:
    """Unit-variance Gaussian random field dominated by features of size ≈ ``scale_px``.

    White noise low-passed by a Gaussian of standard deviation ``scale_px``/2 (an isotropic
    correlated field); its level sets are blob-like pores of roughly that size.
    """
    ny, nx = shape
    fy = fft.fftfreq(ny)[:, None]
    fx = fft.rfftfreq(nx)[None, :]
    s = scale_px / 2.0
    gain = np.exp(-2.0 * np.pi**2 * s * s * (fx * fx + fy * fy)).astype(np.float32)
    gain[0, 0] = 0.0
    white = rng.standard_normal(shape, dtype=np.float32)
    field = fft.irfft2(fft.rfft2(white, workers=1) * gain, s=shape, workers=1)
    std = float(field.std())
    if std > 0:
        field /= std
    return field.astype(np.float32, copy=False)


def segment_distance(
    yy: np.ndarray, xx: np.ndarray, p0: tuple[float, float], p1: tuple[float, float]
) -> np.ndarray:
    """Euclidean distance from grid points (yy, xx) to the segment p0–p1 (points as (y, x))."""
    y0, x0 = p0
    dy, dx = p1[0] - y0, p1[1] - x0
    length2 = dy * dy + dx * dx
    if length2 <= 0:
        return np.hypot(yy - y0, xx - x0)
    t = ((yy - y0) * dy + (xx - x0) * dx) / length2
    np.clip(t, 0.0, 1.0, out=t)
    return np.hypot(yy - (y0 + t * dy), xx - (x0 + t * dx))
