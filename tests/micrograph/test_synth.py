"""The synthetic micrograph generator: reproducibility, optics, counting noise, detector."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import fft, ndimage

from facility.micrograph.synth import SCENES, ChargingSpec, make_micrograph
from facility.micrograph.synth.optics import gaussian_blur, probe_covariance


def test_same_seed_same_image_other_seed_other_image() -> None:
    a = make_micrograph(seed=11, shape=(96, 128), scene="fibres")
    b = make_micrograph(seed=11, shape=(96, 128), scene="fibres")
    c = make_micrograph(seed=12, shape=(96, 128), scene="fibres")
    assert np.array_equal(a.image, b.image)
    assert not np.array_equal(a.image, c.image)
    assert a.image.shape == (96, 128)


@pytest.mark.parametrize("scene", sorted(SCENES))
@pytest.mark.parametrize(("bits", "dtype"), [(8, np.uint8), (16, np.uint16)])
def test_every_scene_renders_at_both_depths(scene: str, bits: int, dtype: type) -> None:
    m = make_micrograph(seed=3, shape=(128, 160), scene=scene, bit_depth=bits, dose=300)
    assert m.image.dtype == dtype
    top = 2**bits - 1
    # nominal gain puts the 99.9th percentile of the signal at offset + 0.6 of full scale
    assert 0.2 * top < np.quantile(m.image, 0.999) < 0.9 * top
    assert m.image.std() > 0
    assert m.truth["scene"] == scene and m.truth["bit_depth"] == bits


def test_truth_records_the_probe() -> None:
    t = make_micrograph(seed=1, shape=(64, 64), sigma_px=2.0, astigmatism=4.0, angle_deg=200).truth
    assert t["sigma_major"] == pytest.approx(4.0)
    assert t["sigma_minor"] == pytest.approx(1.0)
    assert math.sqrt(t["sigma_major"] * t["sigma_minor"]) == pytest.approx(t["sigma_px"])
    assert t["angle_deg"] == pytest.approx(20.0)


def test_isotropic_blur_matches_scipy_gaussian_filter() -> None:
    # reference: scipy.ndimage.gaussian_filter with periodic ("wrap") boundary
    rng = np.random.default_rng(0)
    img = rng.random((128, 96)).astype(np.float32)
    ours = gaussian_blur(img, probe_covariance(2.5, 2.5, 0.0))
    ref = ndimage.gaussian_filter(img.astype(np.float64), 2.5, mode="wrap", truncate=8.0)
    assert np.max(np.abs(ours - ref)) < 2e-3 * float(img.std())


def test_elliptical_blur_has_the_requested_second_moments() -> None:
    # the blurred image of a point is the Gaussian itself: its second moments are Σ (mathematics)
    img = np.zeros((129, 129), dtype=np.float32)
    img[64, 64] = 1.0
    cov = probe_covariance(5.0, 2.0, 30.0)
    psf = gaussian_blur(img, cov).astype(np.float64)
    yy, xx = np.mgrid[0:129, 0:129] - 64.0
    total = psf.sum()
    measured = (
        np.array(
            [
                [np.sum(psf * xx * xx), np.sum(psf * xx * yy)],
                [np.sum(psf * xx * yy), np.sum(psf * yy * yy)],
            ]
        )
        / total
    )
    assert total == pytest.approx(1.0, abs=1e-5)
    assert np.allclose(measured, cov, atol=1e-3)
    # major axis 30° from +x towards +y (later rows)
    _, evecs = np.linalg.eigh(measured)
    major = evecs[:, 1]
    assert math.degrees(math.atan2(major[1], major[0])) % 180 == pytest.approx(30.0, abs=0.1)


def test_mean_signal_is_the_dose() -> None:
    # dose = mean detected electrons per pixel (the generator's stated definition, DOMAIN.md:
    # dose per pixel = I·t/e); undo the stated offset and gain and compare
    m = make_micrograph(
        seed=5, shape=(256, 256), scene="porous", dose=250.0, bit_depth=16, offset=0.1, gain=0.9
    )
    t = m.truth
    electrons = (m.image.astype(np.float64) - t["offset"] * 65535) / t["grey_per_electron"]
    assert electrons.mean() == pytest.approx(250.0, rel=0.01)


@pytest.mark.parametrize("dose", [50.0, 400.0])
def test_counting_noise_is_poisson(dose: float) -> None:
    # Poisson counts have variance equal to their mean (textbook), so the white-noise floor of
    # the spectrum, where a σ = 6 px probe has removed all specimen power, is dose·g² + 1/12
    # (the last term: rounding to whole grey levels, uniform quantisation noise).
    m = make_micrograph(
        seed=9, shape=(256, 256), scene="particles", sigma_px=6.0, dose=dose, bit_depth=16
    )
    g = m.truth["grey_per_electron"]
    x = m.image.astype(np.float64)
    power = np.abs(fft.fft2(x - x.mean())) ** 2 / x.size
    fy = fft.fftfreq(256)[:, None]
    fx = fft.fftfreq(256)[None, :]
    floor = power[np.hypot(fx, fy) > 0.3].mean()
    assert floor == pytest.approx(dose * g * g + 1 / 12, rel=0.05)


def test_offset_and_gain_move_the_grey_levels() -> None:
    # detector black level and contrast (common practice, no source)
    dark = make_micrograph(seed=2, shape=(128, 128), offset=0.0, gain=0.7, bit_depth=16).image
    bright = make_micrograph(seed=2, shape=(128, 128), offset=0.2, gain=1.2, bit_depth=16).image
    assert np.median(bright) > np.median(dark) + 0.15 * 65535
    assert bright.std() > dark.std()


def test_charging_is_applied_and_recorded() -> None:
    spec = ChargingSpec(kinds=("line_jumps",), strength=0.8)
    clean = make_micrograph(seed=7, shape=(128, 128), scene="edges")
    charged = make_micrograph(seed=7, shape=(128, 128), scene="edges", charging=spec)
    assert not np.array_equal(clean.image, charged.image)
    assert charged.truth["charging_kinds"] == ("line_jumps",)
    assert charged.truth["charging_strength"] == pytest.approx(0.8)
    assert clean.truth["charging_kinds"] == ()


@pytest.mark.parametrize(
    "kwargs",
    [{"scene": "moon"}, {"bit_depth": 12}, {"sigma_px": 0.0}, {"astigmatism": 0.5}, {"dose": -1.0}],
)
def test_bad_arguments_are_refused(kwargs: dict) -> None:
    with pytest.raises(ValueError):
        make_micrograph(seed=1, shape=(32, 32), **kwargs)
