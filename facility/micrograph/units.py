"""Unit spellings found in micrograph metadata, and their factors to the package's canonical units.

Canonical units are the ones in the condition names: kV, mm, nm, µs, nA, Pa, degrees. Lookups are
per quantity, which is what makes case-insensitive matching safe: "PA" is pascal for a pressure
but "pA" is picoampere for a current, and the two tables never meet.
"""

from __future__ import annotations

import math

__all__ = ["QUANTITY_UNITS", "UnitError", "canonical_unit", "to_canonical"]

_TORR_PA = 101325.0 / 760.0  # definition of the torr (1/760 standard atmosphere)

# quantity -> {unit spelling: factor to the canonical unit}. Both micro signs (U+00B5 and the
# Greek U+03BC) and the ASCII "u" stand in for micro, as they do in hand-written files.
QUANTITY_UNITS: dict[str, dict[str, float]] = {
    # No megavolt: case folding would turn a (meaningless) "mV" into it.
    "voltage_kv": {"kV": 1.0, "V": 1e-3, "keV": 1.0, "eV": 1e-3},
    "length_mm": {"m": 1e3, "cm": 10.0, "mm": 1.0, "µm": 1e-3, "nm": 1e-6, "pm": 1e-9, "Å": 1e-7},
    "length_nm": {"m": 1e9, "cm": 1e7, "mm": 1e6, "µm": 1e3, "nm": 1.0, "pm": 1e-3, "Å": 0.1},
    "time_us": {"s": 1e6, "ms": 1e3, "µs": 1.0, "ns": 1e-3},
    "current_na": {"A": 1e9, "mA": 1e6, "µA": 1e3, "nA": 1.0, "pA": 1e-3, "fA": 1e-6},
    "pressure_pa": {
        "Pa": 1.0,
        "hPa": 100.0,
        "kPa": 1e3,
        "bar": 1e5,
        "mbar": 100.0,
        "Torr": _TORR_PA,
        "mTorr": _TORR_PA * 1e-3,
    },
    "angle_deg": {
        "deg": 1.0,
        "°": 1.0,
        "degrees": 1.0,
        "rad": 180.0 / math.pi,
        "mrad": 0.18 / math.pi,
    },
    "ratio": {"x": 1.0, "×": 1.0, "kx": 1e3, "k×": 1e3},
    "number": {},
}

_MICRO_SIGNS = ("µ", "μ", "u")


class UnitError(ValueError):
    """A unit that does not belong to the quantity (e.g. "mm" given for a voltage)."""


def _normalise(unit: str) -> str:
    unit = unit.strip()
    for sign in _MICRO_SIGNS[1:]:
        if unit.startswith(sign) and len(unit) > 1:
            unit = "µ" + unit[1:]
    return {"A°": "Å", "Angstrom": "Å", "angstrom": "Å", "degree": "deg"}.get(unit, unit)


def canonical_unit(quantity: str, unit: str) -> str:
    """The table's spelling of ``unit`` for ``quantity``; exact case first, then case-insensitive."""
    table = QUANTITY_UNITS[quantity]
    spelled = _normalise(unit)
    if spelled in table:
        return spelled
    folded = [name for name in table if name.casefold() == spelled.casefold()]
    if len(folded) == 1:
        return folded[0]
    raise UnitError(f"unit {unit!r} is not a unit of {quantity.split('_')[0]}")


def to_canonical(value: float, quantity: str, unit: str | None) -> float:
    """``value`` given in ``unit`` expressed in the quantity's canonical unit (None = already is)."""
    if unit is None or unit == "":
        return value
    return value * QUANTITY_UNITS[quantity][canonical_unit(quantity, unit)]
