"""Random fields and geometry helpers used to build synthetic specimen scenes.

All fields are noise-free *expected* quantities (electron yield, not counts); photon/electron
noise is added later by the pipeline in :mod:`facility.micrograph.synth`.
"""

from __future__ import annotations

import numpy as np
from scipy import fft


def _random_spectrum(shape: tuple[int, int], rng: np.random.Generator) -> np.ndarray:
    """Half-plane spectrum of white Gaussian noise, drawn directly in Fourier space."""
    ny, nx = shape
    half = (ny, nx // 2 + 1)
    spec = np.empty(half, dtype=np.complex64)
    spec.real = rng.standard_normal(half, dtype=np.float32)
    spec.imag = rng.standard_normal(half, dtype=np.float32)
    return spec


def _unit(field: np.ndarray) -> np.ndarray:
    field = field.astype(np.float32, copy=False)
    field -= np.float32(field.mean())
    std = float(field.std())
    if std > 0:
        field /= np.float32(std)
    return field


def _gaussian_gain(shape: tuple[int, int], sigma: float) -> np.ndarray:
    """Transfer function exp(−2π²σ²f²) of a Gaussian blur on the rfft half-plane (separable)."""
    ny, nx = shape
    k = -2.0 * np.pi**2 * sigma * sigma
    gy = np.exp(k * fft.fftfreq(ny) ** 2).astype(np.float32)
    gx = np.exp(k * fft.rfftfreq(nx) ** 2).astype(np.float32)
    return gy[:, None] * gx[None, :]


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
    fy2 = (fft.fftfreq(ny) ** 2).astype(np.float32)[:, None]
    fx2 = (fft.rfftfreq(nx) ** 2).astype(np.float32)[None, :]
    q0 = 1.0 / (2.0 * np.pi * max(corr_px, 1e-3))
    amp = (fy2 + fx2 + np.float32(q0 * q0)) ** np.float32(-beta / 4.0)
    amp[0, 0] = 0.0
    spec = _random_spectrum(shape, rng)
    spec *= amp
    return _unit(fft.irfft2(spec, s=shape, workers=1))


def band_field(shape: tuple[int, int], rng: np.random.Generator, *, scale_px: float) -> np.ndarray:
    """Unit-variance Gaussian random field dominated by features of size ≈ ``scale_px``.

    White noise low-passed by a Gaussian of standard deviation ``scale_px``/2 (an isotropic
    correlated field); its level sets are blob-like pores of roughly that size.
    """
    spec = _random_spectrum(shape, rng)
    spec *= _gaussian_gain(shape, scale_px / 2.0)
    spec[0, 0] = 0.0
    return _unit(fft.irfft2(spec, s=shape, workers=1))


def gaussian_smooth_pair(
    mask: np.ndarray, sigma_a: float, sigma_b: float
) -> tuple[np.ndarray, np.ndarray]:
    """``mask`` blurred by Gaussians of two widths (periodic boundary), sharing one forward FFT."""
    spec = fft.rfft2(mask.astype(np.float32), workers=1)
    out = []
    for sigma in (sigma_a, sigma_b):
        blurred = fft.irfft2(spec * _gaussian_gain(mask.shape, sigma), s=mask.shape, workers=1)
        out.append(blurred.astype(np.float32, copy=False))
    return out[0], out[1]


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
