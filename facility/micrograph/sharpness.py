"""Effective probe size, astigmatism and their evidence for one micrograph.

Two independent measurements of the probe covariance Σ are combined:

* the spectral model fit of :mod:`.spectral` (Brostrøm & Mølhave, Microsc. Microanal. 2022),
  which uses the whole image and holds for any specimen whose power spectrum is close to a power
  law (particles, fibres, pores, textured films);
* edge-profile fits on the strongest edges of a central crop (:mod:`.edgeprofile`; the
  line-scan edge-sharpness idea, with contrast-to-gradient after Ishitani & Sato, J. Electron
  Microsc. 51 (2002) 369, as a second reading), which holds for specimens made of clean steps —
  straight-edged patterns whose spectrum is a few lines rather than a power law.

Each gives (log σ, u, v) with a covariance; they are combined by inverse-covariance weighting
(the product of the two Gaussian likelihoods). The edge estimate carries an extra systematic
allowance, because edge detail finer than the probe (bright rims, coatings) makes steps look
sharper than the probe is; so on rimmed specimens the spectrum dominates, and on sparse straight
edges, where the spectrum is poorly determined, the edges do. Rows are fast-scan lines; angles
are measured from the scan direction (+x) towards later rows (+y).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .edgeprofile import EdgeCheck, check_edges, fit_edge_shape
from .spectral import SECTORS, ProbeShape, fit_spectrum

# Below about this σ a point-sampled image cannot separate the probe from the pixel grid: the
# spectrum is dominated by aliasing and edge estimators are biased (DOMAIN.md: below ~1–2 px).
DEFAULT_PIXEL_LIMIT_PX = 0.8
# √0.5 / 2π: σ must attenuate the power by e^−0.5 inside the band where specimen power is above
# noise, else the roll-off is not seen and σ is only an upper bound.
BAND_FACTOR = math.sqrt(0.5) / (2.0 * math.pi)
SCAN_AXIS_TOLERANCE_DEG = 15.0
EDGE_CROP = 512
MIN_SIDE = 32
# Systematic allowance of the edge estimate (log units): rims and coatings make edges read
# sharper by up to tens of percent; u, v (the shape) suffer less as all edges are affected alike.
EDGE_SYSTEMATIC = (0.15, 0.10, 0.10)


@dataclass(frozen=True)
class Sharpness:
    """Probe estimate in pixels; NaN where the image holds no measurable specimen signal."""

    sigma_px: float
    sigma_major_px: float
    sigma_minor_px: float
    astigmatism_ratio: float
    astigmatism_angle_deg: float
    resolvable_sigma_px: float
    pixel_limited: bool
    se_log_ratio: float
    long_axis: str  # "scan lines", "across scan lines", "oblique"
    evidence: dict[str, float | str] = field(default_factory=dict)

    @property
    def major_measurable(self) -> bool:
        return bool(self.sigma_major_px >= self.resolvable_sigma_px)


def _central_crop(image: np.ndarray, size: int) -> np.ndarray:
    ny, nx = image.shape
    y0, x0 = max((ny - size) // 2, 0), max((nx - size) // 2, 0)
    return image[y0 : y0 + size, x0 : x0 + size]


def _axis_name(angle_deg: float) -> str:
    a = angle_deg % 180.0
    if min(a, 180.0 - a) <= SCAN_AXIS_TOLERANCE_DEG:
        return "scan lines"
    if abs(a - 90.0) <= SCAN_AXIS_TOLERANCE_DEG:
        return "across scan lines"
    return "oblique"


def _no_signal(reason: str, limit: float) -> Sharpness:
    nan = math.nan
    return Sharpness(nan, nan, nan, nan, nan, limit, False, nan, "oblique", {"status": reason})


def _edges(crop: np.ndarray, sigma: float, noise: float) -> EdgeCheck | None:
    edges = check_edges(crop, sigma, noise)
    # a first guess far too small leaves the strips too short for the edges, one far too large
    # smooths them away: then measure once more from the edges' own reading
    if edges is not None and not 0.5 < edges.profile_sigma_px / sigma < 1.3:
        again = check_edges(crop, edges.profile_sigma_px, noise)
        if again is not None:
            edges = again
    return edges


def _combine(
    x_s: np.ndarray, cov_s: np.ndarray, x_e: np.ndarray, info_e: np.ndarray
) -> tuple[np.ndarray, np.ndarray, float]:
    """Inverse-covariance combination; the edge information is first widened by the systematic
    allowance, (I⁻¹ + C_sys)⁻¹ = I (1 + C_sys I)⁻¹, which stays finite where I is singular."""
    info_s = np.linalg.inv(cov_s)
    c_sys = np.diag(np.square(EDGE_SYSTEMATIC))
    info_e = info_e @ np.linalg.inv(np.eye(3) + c_sys @ info_e)
    info_e = 0.5 * (info_e + info_e.T)
    total = info_s + info_e
    x = np.linalg.solve(total, info_s @ x_s + info_e @ x_e)
    cov = np.linalg.inv(total)
    edge_share = float(info_e[0, 0] / total[0, 0])
    return x, cov, edge_share


def measure_sharpness(
    image: np.ndarray,
    *,
    pixel_limit_px: float = DEFAULT_PIXEL_LIMIT_PX,
    sectors: int = SECTORS,
    edge_check: bool = True,
) -> Sharpness:
    """Measure σ, astigmatism and their evidence on a 2-D grey-level image (any numeric dtype)."""
    img = np.asarray(image)
    if img.ndim != 2:
        raise ValueError(f"expected a 2-D image, got shape {img.shape}")
    if min(img.shape) < MIN_SIDE:
        return _no_signal(f"image smaller than {MIN_SIDE} px", pixel_limit_px)
    img = img.astype(np.float32, copy=False)
    if not np.isfinite(img).all():
        img = np.nan_to_num(img, nan=float(np.nanmean(img)), posinf=0.0, neginf=0.0)
    if float(img.std()) == 0.0:
        return _no_signal("uniform image", pixel_limit_px)

    fit = fit_spectrum(img, sectors=sectors)
    if fit.signal_band_q <= 0.0:
        return _no_signal("no specimen power above the noise floor", pixel_limit_px)
    evidence: dict[str, float | str] = {
        "method": "power-spectrum model fit (Brostrom & Molhave 2022)",
        "spectral_sigma_px": fit.sigma_px,
        "spectral_ratio": fit.ratio,
        "spectral_isotropic_sigma_px": fit.isotropic_sigma_px,
        "scene_exponent": fit.alpha,
        "noise_power": fit.noise_power,
        "signal_band_cycles_per_px": fit.signal_band_q,
        "reduced_deviance": fit.reduced_deviance,
    }
    x, cov = fit.shape_params, fit.shape_covariance
    if edge_check:
        edges = _edges(_central_crop(img, EDGE_CROP), fit.sigma_px, fit.noise_power)
        shape = fit_edge_shape(edges) if edges is not None else None
        if edges is None or shape is None:
            evidence["edge_check"] = "too few strong edges"
        else:
            evidence["edge_count"] = float(edges.edges)
            evidence["edge_profile_sigma_px"] = edges.profile_sigma_px
            evidence["edge_profile_spread"] = edges.profile_spread
            evidence["contrast_to_gradient_sigma_px"] = edges.cg_sigma_px
            evidence["edge_to_spectral_ratio"] = edges.profile_sigma_px / fit.sigma_px
            x, cov, share = _combine(x, cov, shape.params, shape.information)
            evidence["edge_weight"] = share
            evidence["method"] = "power-spectrum fit combined with edge profiles"
    probe = ProbeShape.from_params(x)
    rho = math.log(probe.ratio)
    direction = x[1:] / rho if rho > 1e-6 else np.array([1.0, 0.0])
    se_log_ratio = math.sqrt(max(float(direction @ cov[1:, 1:] @ direction), 0.0))
    resolvable = max(pixel_limit_px, BAND_FACTOR / fit.signal_band_q)
    # an axis below the resolvable size is only known to be at most that size, so the ratio is
    # reported between the axes as far as they can be resolved
    ratio = max(probe.sigma_major_px, resolvable) / max(probe.sigma_minor_px, resolvable)
    evidence["se_log_sigma"] = math.sqrt(max(float(cov[0, 0]), 0.0))
    evidence["se_log_ratio"] = se_log_ratio
    evidence["resolvable_sigma_px"] = resolvable
    evidence["fitted_ratio"] = probe.ratio
    return Sharpness(
        sigma_px=probe.sigma_px,
        sigma_major_px=probe.sigma_major_px,
        sigma_minor_px=probe.sigma_minor_px,
        astigmatism_ratio=ratio,
        astigmatism_angle_deg=probe.angle_deg,
        resolvable_sigma_px=resolvable,
        pixel_limited=bool(probe.sigma_px < resolvable),
        se_log_ratio=se_log_ratio,
        long_axis=_axis_name(probe.angle_deg),
        evidence=evidence,
    )
