"""Beam–specimen physics and Gaussian-probe constants used across the micrograph package.

Every function is a closed-form textbook formula; the source is named in each docstring. Physical
constants come from scipy.constants (CODATA), so nothing here is a typed-in number except the
empirical coefficients of the Kanaya–Okayama range.
"""

from __future__ import annotations

import math

from scipy import constants
from scipy.special import ndtri

__all__ = [
    "EDGE_10_90_PER_SIGMA",
    "EDGE_20_80_PER_SIGMA",
    "EDGE_25_75_PER_SIGMA",
    "FULL_CONTRAST_PER_SIGMA",
    "FWHM_PER_SIGMA",
    "dose_per_pixel",
    "edge_rise_factor",
    "electron_wavelength_pm",
    "kanaya_okayama_range_nm",
    "minimum_voltage_for_edge_kv",
    "overvoltage",
]


def edge_rise_factor(lo: float = 0.2, hi: float = 0.8) -> float:
    """Distance between the ``lo`` and ``hi`` levels of a Gaussian-blurred step, in units of σ.

    A step edge seen through a Gaussian probe of standard deviation σ has the edge-spread function
    Φ(x/σ), so the rise from fraction ``lo`` to fraction ``hi`` spans (Φ⁻¹(hi) − Φ⁻¹(lo))·σ.
    """
    if not (0.0 < lo < hi < 1.0):
        raise ValueError(f"need 0 < lo < hi < 1, got lo={lo}, hi={hi}")
    return float(ndtri(hi) - ndtri(lo))


# Headline rise distances of a Gaussian probe, all in units of σ (mathematics of the normal law).
EDGE_20_80_PER_SIGMA: float = edge_rise_factor(0.2, 0.8)
EDGE_25_75_PER_SIGMA: float = edge_rise_factor(0.25, 0.75)
EDGE_10_90_PER_SIGMA: float = edge_rise_factor(0.1, 0.9)
FWHM_PER_SIGMA: float = 2.0 * math.sqrt(2.0 * math.log(2.0))
# Step height divided by the maximum slope of Φ(x/σ): the "contrast-to-gradient" width.
FULL_CONTRAST_PER_SIGMA: float = math.sqrt(2.0 * math.pi)


def electron_wavelength_pm(kv: float) -> float:
    """Relativistic de Broglie wavelength (pm) of an electron accelerated through ``kv`` kilovolts.

    λ = h / √(2 m₀ e V (1 + e V / (2 m₀ c²))) — the standard relativistically corrected formula of
    electron optics (e.g. Williams & Carter, *Transmission Electron Microscopy*, ch. 1).
    """
    if not kv > 0:
        raise ValueError(f"accelerating voltage must be positive, got {kv} kV")
    m0 = constants.m_e
    e = constants.e
    volts = kv * 1e3
    momentum = math.sqrt(2.0 * m0 * e * volts * (1.0 + e * volts / (2.0 * m0 * constants.c**2)))
    return constants.h / momentum * 1e12


def kanaya_okayama_range_nm(e_kev: float, a: float, z: float, density_g_cm3: float) -> float:
    """Electron penetration range in nm after Kanaya & Okayama, J. Phys. D 5 (1972) 43.

    R[µm] = 0.0276 · A · E^1.67 / (Z^0.889 · ρ), with E in keV, A in g/mol and ρ in g/cm³. The
    result depends directly on the density, so callers should report the density they used.
    """
    if e_kev <= 0 or a <= 0 or z <= 0 or density_g_cm3 <= 0:
        raise ValueError("energy, atomic weight, atomic number and density must all be positive")
    range_um = 0.0276 * a * e_kev**1.67 / (z**0.889 * density_g_cm3)
    return range_um * 1e3


def dose_per_pixel(probe_current_a: float, dwell_s: float) -> float:
    """Incident electrons per pixel, I · t_dwell / e (elementary charge from CODATA)."""
    if probe_current_a < 0 or dwell_s < 0:
        raise ValueError("probe current and dwell time cannot be negative")
    return probe_current_a * dwell_s / constants.e


def overvoltage(e0_kev: float, edge_kev: float) -> float:
    """Overvoltage ratio U = E₀ / E_c of beam energy to the ionisation-edge energy.

    X-ray microanalysis needs U ≳ 2 for useful excitation (≥ 1.5 at the very least); this is
    common practice in the trade rather than a single published rule.
    """
    if e0_kev <= 0 or edge_kev <= 0:
        raise ValueError("beam and edge energies must be positive")
    return e0_kev / edge_kev


def minimum_voltage_for_edge_kv(edge_kev: float, min_overvoltage: float = 2.0) -> float:
    """Lowest accelerating voltage (kV) that gives the wanted overvoltage on an edge (U · E_c)."""
    if edge_kev <= 0 or min_overvoltage < 1:
        raise ValueError("edge energy must be positive and the overvoltage at least 1")
    return edge_kev * min_overvoltage
