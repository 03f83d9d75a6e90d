"""Acquisition conditions and pixel size from an image's tags and texts, never trusted blindly.

Pixel size, in this order of trust (the source used is reported):

1. ``caller`` — a value passed in (e.g. from the session form) overrides everything;
2. ``ome-xml`` — ``PhysicalSizeX`` (with ``PhysicalSizeXUnit``, default µm per the OME schema)
   of the first ``Pixels`` element in an OME-XML ImageDescription;
3. ``text-block`` — a pixel-size entry of a key/value block in any ASCII tag;
4. ``tiff-resolution`` — XResolution with ResolutionUnit inch or centimetre (TIFF 6.0 §Fields),
   ignoring values that say nothing: unit "none" (1/1 aspect ratios) and print defaults such as
   72/96 dpi that image programs write regardless of the content;
5. ``magnification`` — reference display width / (magnification × image width in pixels), the
   definition of magnification against a reference width (ISO 16700 calibrates it);
6. ``none``.

Every value is checked against a physical range for the instrument kind; out-of-range values go
to ``suspect`` with the reason and are not used.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping
from dataclasses import dataclass, field

from .read import LoadedImage
from .textblock import FIELDS, Entry, MappingError, parse_entries, parse_text_block
from .units import UnitError, to_canonical

__all__ = [
    "FIELDS",
    "PLAUSIBLE_RANGES",
    "MappingError",
    "Metadata",
    "extract_metadata",
    "parse_text_block",
    "plausibility_problem",
]

# (low, high) inclusive per condition, in canonical units. Why these bounds:
# - voltage: SEM columns run 1–30 kV (DOMAIN.md); beam deceleration lands down to ~50 V, so
#   0.05 kV is the floor. TEMs run up to 200–300 kV (DOMAIN.md); 20 kV is below any TEM gun.
# - working distance: 2–20 mm is typical (DOMAIN.md); immersion lenses work under 1 mm and large
#   chambers reach ~50 mm. Zero would put the specimen on the pole piece, so the floor is 0.05 mm.
# - pixel size: 1 pm (atomic-resolution TEM is ~5 pm/px) to 100 µm (a 1000 px scan at ×10 of a
#   127 mm reference width is 12.7 µm/px); anything outside is a unit mistake.
# - dwell: 5 ns (fastest TV-rate scans ~25 ns) to 0.1 s (slow X-ray mapping dwells are ms).
# - magnification: ×1 to ×10 million (SEM/TEM tops out near ×2 million).
# - probe current: 0.01 pA (below any detector's use) to 5 µA (analytical W/LaB6 guns, ~1–2 µA).
# - spot size: an index (1–10) or a size in nm on some instruments; positive and at most 1000.
# - pressure: high vacuum is ~1e-5–1e-2 Pa and environmental mode reaches ~2.7 kPa (DOMAIN.md);
#   4 kPa leaves headroom. Zero or negative is a gauge that is off, not a pressure.
# - tilt: stages tilt within ±90°; a larger magnitude is a unit or sign error.
# (All bounds: common practice, no single source, apart from the DOMAIN.md figures named above.)
_SEM_VOLTAGE = (0.05, 30.0)
_TEM_VOLTAGE = (20.0, 300.0)
PLAUSIBLE_RANGES: dict[str, tuple[float, float]] = {
    "accelerating_voltage_kv": _SEM_VOLTAGE,
    "working_distance_mm": (0.05, 80.0),
    "pixel_size_nm": (1e-3, 1e5),
    "dwell_time_us": (5e-3, 1e5),
    "magnification": (1.0, 1e7),
    "probe_current_na": (1e-5, 5e3),
    "spot_size": (1e-3, 1e3),
    "chamber_pressure_pa": (1e-10, 4e3),
    "tilt_deg": (-90.0, 90.0),
}

# Whole-number dots-per-inch values written by image programs by default (common practice, no
# source): a micrograph whose pixel really were 1/72 inch would be 353 µm wide per pixel.
_DEFAULT_DPI = (72.0, 96.0, 150.0, 300.0, 600.0, 1200.0)
_NM_PER_RES_UNIT = {"INCH": 2.54e7, "CENTIMETER": 1e7, 2: 2.54e7, 3: 1e7}
_UNIT_NAMES = {
    "kv": " kV",
    "mm": " mm",
    "nm": " nm",
    "us": " µs",
    "na": " nA",
    "pa": " Pa",
    "deg": "°",
}
_DOCTYPE = re.compile(r"<!\s*(DOCTYPE|ENTITY)", re.IGNORECASE)


@dataclass
class Metadata:
    """Conditions found (plausible only), the pixel size in use and where it came from."""

    conditions: dict[str, float | str] = field(default_factory=dict)
    pixel_size_nm: float | None = None
    pixel_size_source: str = "none"
    suspect: dict[str, str] = field(default_factory=dict)
    extra: dict[str, str] = field(default_factory=dict)

    def note_suspect(self, name: str, reason: str) -> None:
        self.suspect[name] = f"{self.suspect[name]}; {reason}" if name in self.suspect else reason


def plausibility_problem(name: str, value: float | str, instrument_kind: str = "SEM") -> str | None:
    """Why ``value`` cannot be a real ``name`` on this kind of instrument, or None if it can."""
    if isinstance(value, str):
        return None if value.strip() else "empty"
    if not math.isfinite(value):
        return f"{value} is not a finite number"
    low, high = PLAUSIBLE_RANGES.get(name, (-math.inf, math.inf))
    if name == "accelerating_voltage_kv" and instrument_kind.upper() == "TEM":
        low, high = _TEM_VOLTAGE
    if low <= value <= high:
        return None
    unit = _UNIT_NAMES.get(name.rsplit("_", 1)[-1], "")
    return f"{value:g}{unit} is outside the plausible range {low:g}–{high:g}{unit} for {instrument_kind}"


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _ome_pixel_size(text: str) -> tuple[float | None, str | None, float | None]:
    """(pixel size in nm, problem, Y/X aspect) from OME-XML, or (None, None, None) if not OME."""
    head = text.lstrip()[:4096]
    if not head.startswith("<") or "OME" not in head:
        return None, None, None
    if _DOCTYPE.search(text):
        return None, "OME-XML with a DTD or entities is not parsed (entity expansion risk)", None
    try:
        root = ET.fromstring(text.strip())
    except ET.ParseError as exc:
        return None, f"OME-XML does not parse: {exc}", None
    if _local(root.tag) != "OME":
        return None, None, None
    pixels = next((el for el in root.iter() if _local(el.tag) == "Pixels"), None)
    if pixels is None or "PhysicalSizeX" not in pixels.attrib:
        return None, None, None

    def size(axis: str) -> float:
        unit = pixels.attrib.get(f"PhysicalSize{axis}Unit", "µm")  # OME schema default
        return to_canonical(float(pixels.attrib[f"PhysicalSize{axis}"]), "length_nm", unit)

    try:
        x = size("X")
        y = size("Y") if "PhysicalSizeY" in pixels.attrib else x
    except (ValueError, UnitError) as exc:
        return None, f"OME-XML PhysicalSizeX unreadable: {exc}", None
    return x, None, (y / x if x else None)


def _resolution_pixel_size(tags: Mapping[str, object]) -> tuple[float | None, str | None]:
    """(nm per pixel, problem) from XResolution/ResolutionUnit, None when uninformative."""
    unit = tags.get("ResolutionUnit", 2)  # TIFF 6.0 default unit is the inch
    xres = tags.get("XResolution")
    if xres is None or unit not in _NM_PER_RES_UNIT:
        return None, None  # no tag, or unit "none": an aspect ratio, not a size
    try:
        num, den = (float(v) for v in xres)  # type: ignore[union-attr]
        per_unit = num / den
    except (TypeError, ValueError, ZeroDivisionError):
        return None, f"XResolution {xres!r} is not a rational number"
    if not math.isfinite(per_unit) or per_unit <= 0:
        return None, f"XResolution {per_unit:g} is not positive"
    dpi = per_unit * (1.0 if unit in ("INCH", 2) else 2.54)
    if any(abs(dpi - d) <= 1e-3 * d for d in _DEFAULT_DPI):
        return None, None  # a program's default, not a measurement
    return _NM_PER_RES_UNIT[unit] / per_unit, None  # type: ignore[index]


def extract_metadata(
    image: LoadedImage,
    *,
    mapping: Mapping[str, object] | None = None,
    pixel_size_nm: float | None = None,
    reference_width_mm: float | None = None,
    instrument_kind: str = "SEM",
) -> Metadata:
    """Conditions and pixel size of ``image`` (see the module docstring for the order of trust).

    Raises :class:`MappingError` for a malformed mapping and ValueError for a non-positive
    caller-given pixel size or reference width (those are the caller's mistakes, not the file's).
    """
    if pixel_size_nm is not None and not (math.isfinite(pixel_size_nm) and pixel_size_nm > 0):
        raise ValueError(f"pixel size must be a positive number of nm, got {pixel_size_nm}")
    if reference_width_mm is not None and not (reference_width_mm > 0):
        raise ValueError(f"reference width must be positive, got {reference_width_mm}")
    meta = Metadata()
    candidates: list[tuple[str, float]] = []  # (source, nm) found in the file, in order of trust

    entries: list[Entry] = []
    for text in image.texts:
        ome_nm, problem, aspect = _ome_pixel_size(text)
        if problem:
            meta.note_suspect("pixel_size_nm", f"ome-xml: {problem}")
        if ome_nm is not None:
            candidates.insert(0, ("ome-xml", ome_nm))
            if aspect is not None and abs(aspect - 1.0) > 0.01:
                meta.extra["ome.pixel_aspect_y_over_x"] = f"{aspect:.6g}"
            continue
        entries.extend(parse_entries(text, mapping))

    for entry in entries:
        name = entry.field
        if name is None:
            meta.extra.setdefault(entry.qualified_key, entry.raw)
            continue
        if entry.value is None:
            meta.note_suspect(name, f"{entry.qualified_key}: {entry.problem}")
            continue
        reason = plausibility_problem(name, entry.value, instrument_kind)
        if reason:
            meta.note_suspect(name, f"{entry.qualified_key} = {entry.raw}: {reason}")
        elif name == "pixel_size_nm":
            candidates.append(("text-block", float(entry.value)))
        elif name not in meta.conditions:
            meta.conditions[name] = entry.value
        else:
            meta.extra.setdefault(entry.qualified_key, entry.raw)  # a later duplicate, kept

    res_nm, problem = _resolution_pixel_size(image.tags)
    if problem:
        meta.note_suspect("pixel_size_nm", f"tiff-resolution: {problem}")
    if res_nm is not None:
        candidates.append(("tiff-resolution", res_nm))

    for source, nm in candidates:
        reason = plausibility_problem("pixel_size_nm", nm, instrument_kind)
        if reason is None:
            meta.conditions.setdefault("pixel_size_nm", nm)
            if meta.pixel_size_nm is None:
                meta.pixel_size_nm, meta.pixel_size_source = nm, source
        elif source != "text-block":  # text-block values were judged above
            meta.note_suspect("pixel_size_nm", f"{source}: {reason}")

    if pixel_size_nm is not None:
        meta.pixel_size_nm, meta.pixel_size_source = float(pixel_size_nm), "caller"
    elif meta.pixel_size_nm is None:
        magnification = meta.conditions.get("magnification")
        width = image.header.width
        if isinstance(magnification, float) and reference_width_mm and width > 0:
            nm = reference_width_mm * 1e6 / (magnification * width)
            reason = plausibility_problem("pixel_size_nm", nm, instrument_kind)
            if reason is None:
                meta.pixel_size_nm, meta.pixel_size_source = nm, "magnification"
            else:
                meta.note_suspect("pixel_size_nm", f"magnification: {reason}")
    return meta
