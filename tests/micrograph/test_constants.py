"""Gaussian edge-rise constants used for the resolution figure, against scipy.special."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from facility.micrograph import assess as assess_mod
from facility.micrograph import physics
from facility.micrograph.synth import make_micrograph


@pytest.mark.parametrize(
    ("lo", "hi", "expected"),
    [
        # DOMAIN.md check values; Φ⁻¹ from scipy.special.ndtri (the normal quantile)
        (0.2, 0.8, 1.68324),
        (0.25, 0.75, 1.34898),
        (0.1, 0.9, 2.56310),
    ],
)
def test_edge_rise_factor_matches_normal_quantiles(lo: float, hi: float, expected: float) -> None:
    reference = special.ndtri(hi) - special.ndtri(lo)
    assert physics.edge_rise_factor(lo, hi) == pytest.approx(reference, rel=1e-12)
    assert reference == pytest.approx(expected, abs=5e-6)


def test_named_rise_constants() -> None:
    # rises from scipy.special.ndtri; FWHM by bisecting for the half maximum of scipy.stats.norm.pdf
    assert pytest.approx(special.ndtri(0.8) - special.ndtri(0.2)) == physics.EDGE_20_80_PER_SIGMA
    assert pytest.approx(special.ndtri(0.75) - special.ndtri(0.25)) == physics.EDGE_25_75_PER_SIGMA
    assert pytest.approx(special.ndtri(0.9) - special.ndtri(0.1)) == physics.EDGE_10_90_PER_SIGMA
    lo, hi = 0.0, 5.0
    half = stats.norm.pdf(0.0) / 2.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if stats.norm.pdf(mid) > half else (lo, mid)
    assert pytest.approx(2.0 * lo, rel=1e-10) == physics.FWHM_PER_SIGMA
    assert pytest.approx(2.35482, abs=5e-6) == physics.FWHM_PER_SIGMA  # DOMAIN.md


def test_full_contrast_width_is_step_over_max_slope() -> None:
    # Ishitani & Sato contrast-to-gradient: a unit step Φ(x/σ) has maximum slope φ(0)/σ, so the
    # step over the slope is 1/φ(0) = √(2π) σ (DOMAIN.md: 2.50663 σ); φ from scipy.stats.norm.
    assert pytest.approx(1.0 / stats.norm.pdf(0.0), rel=1e-12) == physics.FULL_CONTRAST_PER_SIGMA
    assert pytest.approx(2.50663, abs=5e-6) == physics.FULL_CONTRAST_PER_SIGMA


def test_mtf_of_gaussian_probe_matches_numerical_transform() -> None:
    # The spectral model uses |MTF|² = exp(−4π²σ²q²); check MTF(q) = exp(−2π²σ²q²) against the
    # Fourier integral of the normal density done by scipy.integrate.quad (mathematics).
    sigma = 1.7
    for q in (0.02, 0.1, 0.25):
        val, _ = integrate.quad(
            lambda x, q=q: stats.norm.pdf(x, scale=sigma) * math.cos(2 * math.pi * q * x), -40, 40
        )
        assert val == pytest.approx(math.exp(-2 * math.pi**2 * sigma**2 * q**2), rel=1e-8)


def test_assess_reports_resolution_as_20_80_rise() -> None:
    img = make_micrograph(seed=4, shape=(256, 256), scene="particles", sigma_px=2.0, dose=500).image
    result = assess_mod.assess(img)
    ratio = result.resolution_px / result.sigma_px
    assert ratio == pytest.approx(special.ndtri(0.8) - special.ndtri(0.2), rel=1e-12)


def test_synthetic_truth_uses_the_same_rise() -> None:
    truth = make_micrograph(seed=1, shape=(64, 64), sigma_px=3.0).truth
    assert truth["resolution_px"] == pytest.approx(3.0 * (special.ndtri(0.8) - special.ndtri(0.2)))
    assert np.isfinite(truth["sigma_px"])
