"""Probe size, astigmatism and the assessment built on them."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import fft, special

from facility.micrograph.assess import (
    ANALYSIS_VERSION,
    FLAG_CODES,
    AssessSettings,
    assess,
)
from facility.micrograph.edgeprofile import check_edges
from facility.micrograph.sharpness import measure_sharpness
from facility.micrograph.spectral import fit_spectrum, periodic_spectrum
from facility.micrograph.synth import make_micrograph
from facility.micrograph.synth.optics import probe_covariance


def model_field(
    shape: tuple[int, int], cov: np.ndarray, *, alpha: float, noise: float, seed: int
) -> np.ndarray:
    """A Gaussian random field whose spectrum is exactly K q^−α exp(−4π² fᵀΣf) + N.

    Built independently of the library: white noise shaped in Fourier space (spectral synthesis)
    plus white noise of variance ``noise``.
    """
    rng = np.random.default_rng(seed)
    ny, nx = shape
    fy = fft.fftfreq(ny)[:, None]
    fx = fft.fftfreq(nx)[None, :]
    q2 = fx * fx + fy * fy
    q2[0, 0] = 1.0
    quad = cov[0, 0] * fx * fx + 2 * cov[0, 1] * fx * fy + cov[1, 1] * fy * fy
    amp = q2 ** (-alpha / 4) * np.exp(-2 * math.pi**2 * quad)
    amp[0, 0] = 0.0
    field = np.real(fft.ifft2(fft.fft2(rng.standard_normal(shape)) * amp))
    field *= 40.0 / field.std()
    return field + rng.normal(0.0, math.sqrt(noise), shape)


def test_periodic_component_differs_by_a_harmonic_function() -> None:
    # Moisan (2011): u = p + s with s smooth — its discrete Laplacian vanishes inside the image
    rng = np.random.default_rng(1)
    yy, xx = np.mgrid[0:96, 0:128]
    u = (0.3 * xx + 0.1 * yy + 5 * rng.standard_normal((96, 128))).astype(np.float32)
    p = fft.irfft2(periodic_spectrum(u), s=u.shape).astype(np.float64)
    s = (u - u.mean()) - p
    lap = s[2:, 1:-1] + s[:-2, 1:-1] + s[1:-1, 2:] + s[1:-1, :-2] - 4 * s[1:-1, 1:-1]
    assert np.abs(lap[1:-1, 1:-1]).max() < 1e-3 * np.abs(s).max()
    assert np.abs(s).max() > 1.0  # the ramp's border jumps went into s


def test_image_without_border_jumps_is_its_own_periodic_component() -> None:
    # first and last rows (and columns) equal: no border jumps, so the smooth part is zero
    yy, xx = np.mgrid[0:64, 0:80]
    u = np.sin(2 * np.pi * 3 * xx / 79) + np.cos(2 * np.pi * 5 * yy / 63)
    ref = fft.rfft2(u - u.mean())
    assert np.allclose(periodic_spectrum(u), ref, atol=1e-3)


@pytest.mark.parametrize("sigma", [1.2, 2.5, 5.0])
def test_fit_recovers_sigma_from_a_model_spectrum(sigma: float) -> None:
    img = model_field((256, 256), probe_covariance(sigma, sigma, 0.0), alpha=3.0, noise=4.0, seed=2)
    fit = fit_spectrum(img)
    assert fit.sigma_px == pytest.approx(sigma, rel=0.08)
    assert fit.ratio < 1.15
    assert fit.noise_power == pytest.approx(4.0, rel=0.1)
    if sigma < 3:  # with a wide probe too little of the power law is left to pin its exponent
        assert fit.alpha == pytest.approx(3.0, abs=0.4)


def test_fit_recovers_elliptical_probe() -> None:
    cov = probe_covariance(2.5 * math.sqrt(2.5), 2.5 / math.sqrt(2.5), 60.0)
    img = model_field((256, 256), cov, alpha=2.5, noise=1.0, seed=3)
    fit = fit_spectrum(img)
    assert fit.sigma_px == pytest.approx(2.5, rel=0.08)
    assert fit.ratio == pytest.approx(2.5, rel=0.12)
    assert fit.angle_deg == pytest.approx(60.0, abs=4.0)


def step_edges(sigma: float, noise: float, seed: int) -> np.ndarray:
    """Straight steps at several angles, each seen through a Gaussian: Φ(d/σ), scipy ndtr."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:256, 0:256].astype(np.float64)
    img = np.full((256, 256), 100.0)
    for ang, c in ((10, 60), (55, 130), (100, 90), (150, 170)):
        t = math.radians(ang)
        d = (xx - c) * math.cos(t) + (yy - c) * math.sin(t)
        img += 40.0 * special.ndtr(d / sigma)
    return img + rng.normal(0, noise, img.shape)


@pytest.mark.parametrize("sigma", [1.5, 3.0])
def test_edge_profiles_and_contrast_to_gradient_on_ideal_steps(sigma: float) -> None:
    img = step_edges(sigma, noise=1.0, seed=4)
    check = check_edges(img, sigma * 1.3, noise_var=1.0)
    assert check is not None and check.edges >= 10
    assert check.profile_sigma_px == pytest.approx(sigma, rel=0.05)
    assert check.cg_sigma_px == pytest.approx(sigma, rel=0.12)


def test_sigma_does_not_drift_with_dose() -> None:
    # issue 3 / DOMAIN.md: the spectrum cutoff moves with dose, the SIRAF model fit should not;
    # same seed → same specimen and probe; only the counting noise changes
    low = measure_sharpness(
        make_micrograph(seed=21, shape=(320, 320), scene="particles", sigma_px=2.5, dose=60).image
    )
    high = measure_sharpness(
        make_micrograph(seed=21, shape=(320, 320), scene="particles", sigma_px=2.5, dose=1000).image
    )
    assert low.sigma_px == pytest.approx(high.sigma_px, rel=0.15)
    assert high.sigma_px == pytest.approx(2.5, rel=0.15)


def test_gain_and_offset_do_not_change_the_estimate() -> None:
    # a linear detector change rescales K and N only (mathematics of the model)
    img = make_micrograph(seed=5, shape=(256, 256), scene="porous", sigma_px=2.0).image
    a = measure_sharpness(img)
    b = measure_sharpness(3.0 * img.astype(np.float64) + 1000.0)
    assert b.sigma_px == pytest.approx(a.sigma_px, rel=1e-3)
    assert b.astigmatism_ratio == pytest.approx(a.astigmatism_ratio, rel=1e-3)


def test_transposing_the_image_mirrors_the_major_axis() -> None:
    # swapping x and y reflects an axis at θ to 90° − θ (geometry)
    img = make_micrograph(
        seed=6, shape=(256, 256), scene="particles", sigma_px=2.0, astigmatism=2.5, angle_deg=20
    ).image
    a = measure_sharpness(img)
    b = measure_sharpness(img.T)
    assert a.astigmatism_angle_deg == pytest.approx(20.0, abs=6.0)
    assert b.astigmatism_angle_deg == pytest.approx(70.0, abs=6.0)


def test_pixel_limited_below_the_sampling() -> None:
    # DOMAIN.md: estimators are biased below σ ≈ 1–2 px; a 0.35 px probe is below the sampling
    sharp = measure_sharpness(
        make_micrograph(seed=7, shape=(256, 256), scene="particles", sigma_px=0.35, dose=500).image
    )
    soft = measure_sharpness(
        make_micrograph(seed=7, shape=(256, 256), scene="particles", sigma_px=3.0, dose=500).image
    )
    assert sharp.pixel_limited
    assert not soft.pixel_limited


@pytest.mark.parametrize(("angle", "axis"), [(0.0, "scan lines"), (90.0, "across scan lines")])
def test_long_axis_along_the_scan_is_named(angle: float, axis: str) -> None:
    img = make_micrograph(
        seed=8, shape=(256, 256), scene="porous", sigma_px=2.0, astigmatism=3.0, angle_deg=angle
    ).image
    result = assess(img)
    assert "astigmatism" in result.flags
    ev = result.evidence["astigmatism"]
    assert ev["long_axis"] == axis
    assert "drift or vibration" in str(ev["note"])


def test_uniform_and_tiny_images_give_no_estimate_and_no_crash() -> None:
    for img in (np.full((128, 128), 7, dtype=np.uint8), np.zeros((16, 300))):
        result = assess(img)
        assert result.sigma_px is None and result.resolution_px is None
        assert "low_resolution" not in result.flags
        json.dumps(result.to_dict())


def test_assessment_is_json_friendly_and_flags_follow_settings() -> None:
    img = make_micrograph(seed=9, shape=(256, 256), scene="fibres", sigma_px=4.0, dose=300).image
    result = assess(img, pixel_size_nm=2.0)
    data = json.loads(json.dumps(result.to_dict()))
    assert data["analysis_version"] == ANALYSIS_VERSION
    assert set(data["flags"]) <= set(FLAG_CODES)
    assert "low_resolution" in data["flags"]  # 1.683 × 4 px ≈ 6.7 px > 4 px
    assert data["resolution_nm"] == pytest.approx(2.0 * data["resolution_px"], rel=1e-5)
    for key in ("resolution", "astigmatism", "charging", "saturated", "pixel_limited"):
        assert key in data["evidence"]
    lenient = assess(img, settings=AssessSettings(low_resolution_px=50.0))
    assert "low_resolution" not in lenient.flags
    assert lenient.resolution_nm is None


def test_float_input_with_bit_depth_counts_saturation() -> None:
    img = make_micrograph(seed=10, shape=(128, 128), gain=3.0, bit_depth=8).image
    as_int = assess(img)
    as_float = assess(img.astype(np.float64), bit_depth=8)
    assert as_int.saturated_fraction == pytest.approx(as_float.saturated_fraction)
    assert "saturated" in as_int.flags
    assert as_int.sigma_px == pytest.approx(as_float.sigma_px, rel=1e-6)
