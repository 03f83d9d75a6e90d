"""Parse free-form key/value text blocks from image files into named, unit-converted conditions.

Accepted shapes (one entry per line): optional ``[Section]`` headers; ``key = value unit`` or
``key: value unit``; a unit may also sit in the key (``WD (mm) = 4``). A text that is a JSON object
is read the same way, nested objects acting as sections. Names are matched case-insensitively with
all punctuation and spaces removed, so ``Acc. Voltage``, ``ACC_VOLTAGE`` and ``accvoltage`` agree.

A per-instrument mapping (staff-edited JSON) adds or overrides names:
``{"<key as in file>": {"field": "<condition name or null>", "unit": "<unit or null>"}}``. The
mapping's unit applies when the value carries none; a unit written in the file always wins. A
``null`` field turns a built-in synonym off, so that key is kept as unknown instead.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

from .units import UnitError, to_canonical

__all__ = [
    "FIELDS",
    "FIELD_QUANTITY",
    "SYNONYMS",
    "Entry",
    "MappingError",
    "normalise_key",
    "parse_entries",
    "parse_text_block",
    "validate_mapping",
]

# Condition name -> quantity table in units.py ("text" for free strings).
FIELD_QUANTITY: dict[str, str] = {
    "accelerating_voltage_kv": "voltage_kv",
    "working_distance_mm": "length_mm",
    "pixel_size_nm": "length_nm",
    "dwell_time_us": "time_us",
    "magnification": "ratio",
    "probe_current_na": "current_na",
    "spot_size": "number",
    "chamber_pressure_pa": "pressure_pa",
    "vacuum_mode": "text",
    "detector": "text",
    "tilt_deg": "angle_deg",
}
FIELDS: tuple[str, ...] = tuple(FIELD_QUANTITY)

# Names of the trade for each condition, as written by operators and acquisition software.
# "keV" beam/landing energies equal the accelerating voltage in kV for electrons (E = eV).
_NAMES: dict[str, tuple[str, ...]] = {
    "accelerating_voltage_kv": (
        "accelerating voltage",
        "acceleration voltage",
        "acc voltage",
        "acc volt",
        "high voltage",
        "HV",
        "EHT",
        "beam energy",
        "landing energy",
    ),
    "working_distance_mm": ("working distance", "work distance", "WD"),
    "pixel_size_nm": ("pixel size", "pixel width", "pixel size x"),
    "dwell_time_us": ("dwell time", "dwell", "pixel dwell time", "pixel dwell"),
    "magnification": ("magnification", "mag"),
    "probe_current_na": ("probe current", "beam current"),
    "spot_size": ("spot size", "spot"),
    "chamber_pressure_pa": ("chamber pressure", "pressure"),
    "vacuum_mode": ("vacuum mode", "vacuum"),
    "detector": ("detector", "detector name"),
    "tilt_deg": ("tilt", "stage tilt", "tilt angle"),
}

_NON_WORD = re.compile(r"[\W_]+", re.UNICODE)


def normalise_key(key: str) -> str:
    """Case-folded key with every space, underscore and punctuation mark removed."""
    return _NON_WORD.sub("", key.casefold())


SYNONYMS: dict[str, str] = {normalise_key(n): f for f, names in _NAMES.items() for n in names}

_SEPARATOR = re.compile(r"[=:]")
_KEY_UNIT = re.compile(r"^(.*?)\s*[\(\[]\s*([^\(\)\[\]]{1,12})\s*[\)\]]\s*$")
_NUMBER = re.compile(r"^\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
_REMARK = re.compile(r"\s*\([^()]*\)\s*$")
_MAX_LINE = 4096
_MAX_KEY = 80
_MAX_VALUE = 500


class MappingError(ValueError):
    """The per-instrument mapping is malformed (unknown field, unit of the wrong kind, ...)."""


@dataclass(frozen=True)
class Entry:
    """One key/value line. ``field`` is None for unknown keys; ``problem`` says why a value of a
    recognised field could not be used (then ``value`` is None)."""

    section: str
    key: str
    raw: str
    field: str | None
    value: float | str | None
    problem: str | None = None

    @property
    def qualified_key(self) -> str:
        return f"{self.section}.{self.key}" if self.section else self.key


def validate_mapping(mapping: object) -> dict[str, tuple[str | None, str | None]]:
    """Check a per-instrument mapping and return it as normalised key -> (field, unit).

    Raises :class:`MappingError` naming the first bad entry, so an admin form can show it.
    """
    if mapping is None:
        return {}
    if not isinstance(mapping, Mapping):
        raise MappingError("mapping must be an object of key -> {field, unit}")
    result: dict[str, tuple[str | None, str | None]] = {}
    for key, spec in mapping.items():
        if not isinstance(key, str) or not normalise_key(key):
            raise MappingError(f"mapping key {key!r} has no letters or digits")
        if not isinstance(spec, Mapping):
            raise MappingError(f"mapping for {key!r} must be an object with 'field' and 'unit'")
        unknown = set(spec) - {"field", "unit"}
        if unknown:
            raise MappingError(f"mapping for {key!r} has unknown entries {sorted(unknown)}")
        field_name = spec.get("field") or None
        unit = spec.get("unit") or None
        if field_name is not None and field_name not in FIELD_QUANTITY:
            raise MappingError(f"mapping for {key!r}: unknown field {field_name!r}")
        if unit is not None:
            if not isinstance(unit, str):
                raise MappingError(f"mapping for {key!r}: unit must be a string or null")
            quantity = FIELD_QUANTITY.get(field_name or "", "text")
            if quantity in ("text", "number"):
                raise MappingError(f"mapping for {key!r}: field {field_name!r} takes no unit")
            try:
                to_canonical(1.0, quantity, unit)
            except UnitError as exc:
                raise MappingError(f"mapping for {key!r}: {exc}") from exc
        result[normalise_key(key)] = (field_name, unit)
    return result


def _lines(text: str) -> Iterator[tuple[str, str, str]]:
    """(section, key, raw value) for each key/value line of an INI-like text."""
    section = ""
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped or stripped[0] in "#;":
            continue
        if len(stripped) > _MAX_LINE:
            continue  # no key/value line is this long; skipping keeps hostile input linear
        if stripped[0] == "[" and stripped[-1] == "]":
            inner = stripped[1:-1]
            if "[" not in inner and "]" not in inner:
                section = inner.strip()
                continue
        sep = _SEPARATOR.search(stripped)
        if sep is None:
            continue
        key, raw = stripped[: sep.start()].strip(), stripped[sep.end() :].strip()
        # A key starts with a letter: this skips dates ("2024:05:01 10:00") and stray numbers.
        if key and len(key) <= _MAX_KEY and key[0].isalpha():
            yield section, key, raw[:_MAX_VALUE]


def _json_lines(
    obj: Mapping[str, object], section: str = "", depth: int = 0
) -> Iterator[tuple[str, str, str]]:
    for key, value in obj.items():
        if isinstance(value, Mapping):
            if depth >= 8:
                continue  # deeper nesting is data, not settings
            yield from _json_lines(value, f"{section}.{key}" if section else str(key), depth + 1)
        elif (
            isinstance(value, str | int | float)
            and not isinstance(value, bool)
            and str(key)[:1].isalpha()
        ):
            yield section, str(key)[:_MAX_KEY], str(value)[:_MAX_VALUE]


def _raw_items(text: str) -> Iterator[tuple[str, str, str]]:
    stripped = text.strip()
    if stripped.startswith("{"):
        try:
            obj = json.loads(stripped)
        except (ValueError, RecursionError):
            obj = None
        if isinstance(obj, dict):
            yield from _json_lines(obj)
            return
    if stripped.startswith("<"):
        return  # XML (e.g. OME) is read by its own parser, not as key/value lines
    yield from _lines(text)


def _resolve(
    section: str, key: str, mapping: dict[str, tuple[str | None, str | None]]
) -> tuple[str | None, str | None, str | None]:
    """(field, default unit, unit written in the key) for a key, mapping before built-ins."""
    key_unit = None
    bracketed = _KEY_UNIT.match(key)
    if bracketed and normalise_key(bracketed.group(1)):
        key, key_unit = bracketed.group(1), bracketed.group(2)
    name = normalise_key(key)
    qualified = normalise_key(section) + name
    for candidate in (qualified, name):
        if candidate in mapping:
            field_name, unit = mapping[candidate]
            return field_name, unit, key_unit
    return SYNONYMS.get(name), None, key_unit


def _convert(field_name: str, raw: str, default_unit: str | None) -> float | str:
    """Value of ``raw`` in the field's canonical unit; raises ValueError with a reason."""
    quantity = FIELD_QUANTITY[field_name]
    if quantity == "text":
        return " ".join(raw.split())
    text = raw.strip()
    if quantity == "ratio" and text[:1] in ("x", "X", "×"):
        text = text[1:] + " x"  # "x5000" is written as often as "5000x"
    match = _NUMBER.match(text)
    if match is None:
        raise ValueError(f"{raw!r} is not a number")
    number = float(match.group(1))
    if not math.isfinite(number):
        raise ValueError(f"{raw!r} is not a finite number")
    # A trailing remark in brackets ("4.1 mm (measured)") is not part of the unit.
    unit = _REMARK.sub("", match.group(2)) or default_unit
    if quantity == "number":
        if unit:
            raise ValueError(f"{raw!r}: no unit expected")
        return number
    if quantity == "ratio" and unit is None:
        return number
    try:
        return to_canonical(number, quantity, unit)
    except UnitError as exc:
        raise ValueError(f"{raw!r}: {exc}") from exc


def parse_entries(text: str, mapping: Mapping[str, object] | None = None) -> list[Entry]:
    """Every key/value entry of ``text`` in order, recognised or not, with conversion problems."""
    resolved = validate_mapping(mapping)
    entries: list[Entry] = []
    for section, key, raw in _raw_items(text):
        field_name, default_unit, key_unit = _resolve(section, key, resolved)
        if field_name is None:
            entries.append(Entry(section, key, raw, None, None))
            continue
        if not raw.strip():
            continue  # a named setting left blank says nothing
        try:
            # Unit precedence: written after the value > written in the key > the mapping's.
            value = _convert(field_name, raw, key_unit or default_unit)
        except ValueError as exc:
            entries.append(Entry(section, key, raw, field_name, None, str(exc)))
            continue
        entries.append(Entry(section, key, raw, field_name, value))
    return entries


def parse_text_block(
    text: str, mapping: Mapping[str, object] | None = None
) -> tuple[dict[str, float | str], dict[str, str]]:
    """(recognised, unknown) from a key/value text block.

    ``recognised`` maps condition names to values in canonical units (first occurrence wins; no
    plausibility check here — that needs the instrument kind, see ``extract_metadata``).
    ``unknown`` keeps every other key (qualified as ``Section.key`` inside a section) with its raw
    text, including recognised names whose value could not be converted and later duplicates.
    """
    recognised: dict[str, float | str] = {}
    unknown: dict[str, str] = {}
    for entry in parse_entries(text, mapping):
        if entry.field is not None and entry.value is not None and entry.field not in recognised:
            recognised[entry.field] = entry.value
        else:
            unknown.setdefault(entry.qualified_key, entry.raw)
    return recognised, unknown
