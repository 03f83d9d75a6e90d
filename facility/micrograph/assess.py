"""One call that judges a micrograph: resolution, astigmatism, charging, saturation.

``assess`` combines the spectral probe measurement of :mod:`.sharpness` (Brostrøm & Mølhave,
Microsc. Microanal. 2022, with edge-profile and contrast-to-gradient cross-checks) and the
scan-line charging evidence of :mod:`.charging`, and raises flags against
:class:`AssessSettings`. The resolution is reported as the 20–80 % rise of a step edge seen
through the measured Gaussian probe, 1.683 σ (Φ⁻¹(0.8) − Φ⁻¹(0.2)).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from .charging import DEFAULT_CHARGING_THRESHOLD, measure_charging
from .physics import EDGE_20_80_PER_SIGMA
from .sharpness import DEFAULT_PIXEL_LIMIT_PX, measure_sharpness

ANALYSIS_VERSION = "2026.12-3"

FLAG_CODES = ("charging", "low_resolution", "astigmatism", "saturated", "pixel_limited")


@dataclass(frozen=True)
class AssessSettings:
    """Flag thresholds; defaults are ours, meant to be set per instrument by facility staff."""

    low_resolution_px: float = 4.0  # 20–80 % edge rise above which the image is called soft
    astigmatism_ratio: float = 1.5  # σ_major / σ_minor above which astigmatism is flagged
    charging_score: float = DEFAULT_CHARGING_THRESHOLD
    saturated_fraction: float = 0.005  # share of pixels at the bottom or top grey level
    pixel_limit_px: float = DEFAULT_PIXEL_LIMIT_PX  # σ below which the sampling limits
    edge_check: bool = True  # run the real-space edge cross-checks


@dataclass
class Assessment:
    """What ``assess`` found; ``to_dict`` gives plain JSON-friendly values (NaN → None)."""

    sigma_px: float | None
    resolution_px: float | None
    resolution_nm: float | None
    astigmatism_ratio: float | None
    astigmatism_angle_deg: float | None
    charging_score: float
    pixel_limited: bool
    saturated_fraction: float
    evidence: dict[str, dict[str, float | str]] = field(default_factory=dict)
    flags: list[str] = field(default_factory=list)
    analysis_version: str = ANALYSIS_VERSION

    def to_dict(self) -> dict[str, Any]:
        return _plain(asdict(self))


def _plain(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        f = float(value)
        return round(f, 6) if math.isfinite(f) else None
    return value


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def _infer_bit_depth(image: np.ndarray) -> int | None:
    if image.dtype == np.uint8:
        return 8
    if image.dtype == np.uint16:
        return 16
    return None


def _saturation(image: np.ndarray, bit_depth: int | None) -> dict[str, float]:
    """Share of pixels at zero and at the top grey level (2**bit_depth − 1, if known)."""
    n = float(image.size)
    low = float(np.count_nonzero(image <= 0)) / n
    high = 0.0
    if bit_depth is not None:
        high = float(np.count_nonzero(image >= 2**bit_depth - 1)) / n
    return {"at_zero_fraction": low, "at_top_fraction": high}


def assess(
    image: np.ndarray,
    pixel_size_nm: float | None = None,
    settings: AssessSettings | None = None,
    *,
    bit_depth: int | None = None,
) -> Assessment:
    """Assess one 2-D grey image (rows = fast-scan lines).

    ``bit_depth`` names the top grey level for saturation and clipping when the pixels come as
    floats (as :func:`facility.micrograph.read.read_image` returns them); for uint8/uint16 input
    it is taken from the type.
    """
    settings = settings or AssessSettings()
    img = np.asarray(image)
    if img.ndim != 2:
        raise ValueError(f"assess expects a 2-D grey image, got shape {img.shape}")
    if bit_depth is None:
        bit_depth = _infer_bit_depth(img)

    sharp = measure_sharpness(
        img, pixel_limit_px=settings.pixel_limit_px, edge_check=settings.edge_check
    )
    charging = measure_charging(img, bit_depth=bit_depth)
    sat = _saturation(img, bit_depth)
    saturated = sat["at_zero_fraction"] + sat["at_top_fraction"]

    sigma = _finite(sharp.sigma_px)
    resolution_px = sigma * EDGE_20_80_PER_SIGMA if sigma is not None else None
    resolution_nm = None
    if resolution_px is not None and pixel_size_nm is not None and pixel_size_nm > 0:
        resolution_nm = resolution_px * float(pixel_size_nm)
    ratio = _finite(sharp.astigmatism_ratio)

    flags: list[str] = []
    evidence: dict[str, dict[str, float | str]] = {}

    res_ev: dict[str, float | str] = dict(sharp.evidence)
    res_ev["threshold_px"] = settings.low_resolution_px
    if resolution_px is not None:
        res_ev["resolution_px"] = resolution_px
        if resolution_px > settings.low_resolution_px:
            flags.append("low_resolution")
    evidence["resolution"] = res_ev

    astig_ev: dict[str, float | str] = {"threshold_ratio": settings.astigmatism_ratio}
    if ratio is not None:
        astig_ev.update(
            {
                "ratio": ratio,
                "fitted_ratio": float(sharp.evidence.get("fitted_ratio", ratio)),
                "angle_deg": sharp.astigmatism_angle_deg,
                "sigma_major_px": sharp.sigma_major_px,
                "sigma_minor_px": sharp.sigma_minor_px,
                "se_log_ratio": sharp.se_log_ratio,
                "resolvable_sigma_px": sharp.resolvable_sigma_px,
                "long_axis": sharp.long_axis,
            }
        )
        # the ratio is taken between the axes as far as they are resolvable, so a long axis
        # below the resolvable size can never raise the flag
        if ratio > settings.astigmatism_ratio and sharp.major_measurable:
            flags.append("astigmatism")
            if sharp.long_axis == "scan lines":
                astig_ev["note"] = (
                    "long axis along the scan lines: drift or vibration during the line scan "
                    "blurs this way too, not only the stigmator"
                )
            elif sharp.long_axis == "across scan lines":
                astig_ev["note"] = (
                    "long axis across the scan lines: line-to-line drift or vibration "
                    "blurs this way too, not only the stigmator"
                )
    evidence["astigmatism"] = astig_ev

    charge_ev: dict[str, float | str] = dict(charging.evidence)
    charge_ev["score"] = charging.score
    charge_ev["threshold"] = settings.charging_score
    if charging.findings:
        charge_ev["findings"] = ", ".join(charging.findings)
    if charging.score >= settings.charging_score:
        flags.append("charging")
    evidence["charging"] = charge_ev

    sat_ev: dict[str, float | str] = dict(sat)
    sat_ev["threshold_fraction"] = settings.saturated_fraction
    if bit_depth is None:
        sat_ev["note"] = "bit depth unknown: only pixels at zero counted"
    if saturated > settings.saturated_fraction:
        flags.append("saturated")
    evidence["saturated"] = sat_ev

    evidence["pixel_limited"] = {
        "sigma_px": sharp.sigma_px,
        "resolvable_sigma_px": sharp.resolvable_sigma_px,
        "pixel_limit_px": settings.pixel_limit_px,
    }
    if sharp.pixel_limited:
        flags.append("pixel_limited")

    return Assessment(
        sigma_px=sigma,
        resolution_px=resolution_px,
        resolution_nm=resolution_nm,
        astigmatism_ratio=ratio,
        astigmatism_angle_deg=_finite(sharp.astigmatism_angle_deg),
        charging_score=float(charging.score),
        pixel_limited=bool(sharp.pixel_limited),
        saturated_fraction=saturated,
        evidence=evidence,
        flags=[f for f in FLAG_CODES if f in flags],
        analysis_version=ANALYSIS_VERSION,
    )
