"""Seeded synthetic SEM micrographs with known probe size, astigmatism, dose and charging.

Pipeline (each stage a physical step of image formation in a scanning microscope):

1. scene — noise-free secondary-electron yield of a specimen-like surface
   (:mod:`.scenes`: ``particles``, ``fibres``, ``porous``, ``edges``), drawn supersampled;
2. probe — convolution with an elliptical Gaussian probe (σ_major, σ_minor, any angle), then point
   sampling at the pixel centres;
3. charging — artefacts applied to the expected signal (:mod:`.charging`);
4. dose — Poisson counting noise, ``dose`` = mean detected electrons per pixel;
5. detector — offset and gain, then quantisation to 8 or 16 bits with clipping.

Rows are fast-scan lines; x (the column index) is the scan direction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import fft

from ..physics import EDGE_20_80_PER_SIGMA
from .charging import ChargingSpec, apply_charging
from .optics import gaussian_blur, probe_covariance
from .scenes import SCENES

# Samples per output pixel when drawing the scene: edges are then sharp at the output sampling
# and the probe acts on an (almost) continuous specimen before point sampling.
SUPERSAMPLE = 2
# The 99.9th percentile of the expected signal lands this far above the offset (fraction of
# full scale) at gain 1 — a typical brightness/contrast setting that leaves head-room.
NOMINAL_SPAN = 0.6


@dataclass
class SynthImage:
    """A synthetic micrograph and the truth it was made from."""

    image: np.ndarray
    truth: dict[str, Any] = field(default_factory=dict)


def make_micrograph(
    *,
    seed: int,
    shape: tuple[int, int] = (512, 512),
    scene: str = "particles",
    sigma_px: float = 1.5,
    astigmatism: float = 1.0,
    angle_deg: float = 0.0,
    dose: float = 200.0,
    bit_depth: int = 8,
    offset: float = 0.05,
    gain: float = 1.0,
    charging: ChargingSpec | None = None,
) -> SynthImage:
    """Make one seeded micrograph.

    ``sigma_px`` is the geometric mean probe σ in output pixels; with ``astigmatism``
    a = σ_major/σ_minor the axes are σ·√a and σ/√a, the major one at ``angle_deg`` from the scan
    direction (+x towards +y, i.e. towards later rows). ``dose`` is the mean number of detected
    electrons per pixel.
    ``offset`` is the black level as a fraction of full scale; ``gain`` the contrast relative to a
    nominal setting that puts the 99.9th percentile of the expected signal at offset + 0.6 of full
    scale. The same seed always gives the same image.
    """
    if scene not in SCENES:
        raise ValueError(f"unknown scene {scene!r}; choose from {sorted(SCENES)}")
    if bit_depth not in (8, 16):
        raise ValueError("bit_depth must be 8 or 16")
    if sigma_px <= 0 or astigmatism < 1.0 or dose <= 0 or gain <= 0:
        raise ValueError("sigma_px, dose and gain must be positive and astigmatism ≥ 1")
    rng = np.random.default_rng(seed)
    ny, nx = int(shape[0]), int(shape[1])
    sig_major = sigma_px * math.sqrt(astigmatism)
    sig_minor = sigma_px / math.sqrt(astigmatism)
    pad = math.ceil(5.0 * sig_major) + 4  # the Gaussian is down to 4e-6 of its peak at 5σ
    ss = SUPERSAMPLE
    # the working grid is padded up to FFT-friendly sizes; the crop starts ``pad`` pixels in
    big = (
        fft.next_fast_len((ny + 2 * pad) * ss, True),
        fft.next_fast_len((nx + 2 * pad) * ss, True),
    )
    yield_map = SCENES[scene](big, float(ss), rng).astype(np.float32, copy=False)
    cov = probe_covariance(sig_major * ss, sig_minor * ss, angle_deg)
    blurred = gaussian_blur(yield_map, cov)
    # point sampling at output pixel centres (the middle of each ss×ss block)
    off = ss // 2
    sampled = blurred[pad * ss + off :: ss, pad * ss + off :: ss][:ny, :nx]
    sampled = np.maximum(sampled, 0.0).astype(np.float64)
    expected = sampled * (dose / float(sampled.mean()))

    full_scale = float(2**bit_depth - 1)
    top = float(np.quantile(expected, 0.999))
    grey_per_electron = gain * NOMINAL_SPAN * full_scale / top
    full_scale_electrons = (1.0 - offset) * full_scale / grey_per_electron
    if charging is not None:
        expected = apply_charging(expected, charging, rng, full_scale_electrons)
        expected = np.maximum(expected, 0.0)
    counts = rng.poisson(expected)
    grey = offset * full_scale + counts * grey_per_electron
    saturated = float(np.mean(grey >= full_scale + 0.5))
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    image = np.clip(np.rint(grey), 0, full_scale).astype(dtype)

    truth: dict[str, Any] = {
        "seed": seed,
        "scene": scene,
        "shape": (ny, nx),
        "sigma_px": float(sigma_px),
        "sigma_major": float(sig_major),
        "sigma_minor": float(sig_minor),
        "astigmatism": float(astigmatism),
        "angle_deg": float(angle_deg % 180.0),
        "resolution_px": float(EDGE_20_80_PER_SIGMA * sigma_px),
        "dose": float(dose),
        "bit_depth": bit_depth,
        "offset": float(offset),
        "gain": float(gain),
        "grey_per_electron": float(grey_per_electron),
        "full_scale_electrons": float(full_scale_electrons),
        "clipped_fraction": saturated,
        "charging_kinds": tuple(charging.kinds) if charging is not None else (),
        "charging_strength": float(charging.strength) if charging is not None else 0.0,
    }
    return SynthImage(image=image, truth=truth)


__all__ = ["SCENES", "ChargingSpec", "SynthImage", "make_micrograph"]
