"""The probe: an elliptical Gaussian blur applied in Fourier space."""

from __future__ import annotations

import math

import numpy as np
from scipy import fft


def probe_covariance(sigma_major: float, sigma_minor: float, angle_deg: float) -> np.ndarray:
    """2×2 covariance (x, y) of an elliptical Gaussian probe.

    x is the column index (fast-scan direction), y the row index; ``angle_deg`` is the direction of
    the major axis measured from +x towards +y.
    """
    t = math.radians(angle_deg)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    return rot @ np.diag([sigma_major**2, sigma_minor**2]) @ rot.T


def gaussian_blur(image: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Convolve with the Gaussian of covariance ``cov`` (pixels²), periodic boundary.

    Uses the exact transfer function exp(−2π² fᵀΣf); callers pad the scene so the wrap-around
    does not reach the part they keep.
    """
    ny, nx = image.shape
    fy = fft.fftfreq(ny)[:, None]
    fx = fft.rfftfreq(nx)[None, :]
    quad = cov[0, 0] * fx * fx + 2.0 * cov[0, 1] * fx * fy + cov[1, 1] * fy * fy
    mtf = np.exp(-2.0 * math.pi**2 * quad).astype(np.float32)
    return fft.irfft2(fft.rfft2(image, workers=1) * mtf, s=image.shape, workers=1)
