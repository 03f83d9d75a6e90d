"""Metadata: key/value text blocks, OME-XML, TIFF resolution tags and the pixel-size order of trust.

Files are written with tifffile/Pillow (reference writers of the formats). Unit factors in the
expectations are SI definitions (BIPM SI brochure: prefixes; 1 mbar = 100 Pa; 1 Torr = 101325/760 Pa;
1 inch = 2.54 cm exactly), written out here independently of facility/micrograph/units.py.
"""

from __future__ import annotations

import io
import math
import re

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from PIL import Image, PngImagePlugin

from facility.micrograph.metadata import (
    FIELDS,
    MappingError,
    Metadata,
    extract_metadata,
    parse_text_block,
)
from facility.micrograph.read import LoadedImage, read_image

IMAGE = np.zeros((32, 64), np.uint8)
TORR = 101325.0 / 760.0  # definition of the torr


def tiff(**kwargs: object) -> LoadedImage:
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, IMAGE, **kwargs)
    return read_image(io.BytesIO(buffer.getvalue()))


def meta_of(**kwargs: object) -> Metadata:
    extract_kwargs = {k: kwargs.pop(k) for k in list(kwargs) if k.startswith("x_")}
    return extract_metadata(tiff(**kwargs), **{k[2:]: v for k, v in extract_kwargs.items()})


# ------------------------------------------------------------------------ table of text blocks

TEXT_BLOCKS = [
    # (text, expected recognised values in the canonical units; units by SI definition)
    ("Accelerating Voltage = 5 kV", {"accelerating_voltage_kv": 5.0}),
    ("acc. voltage: 5000 V", {"accelerating_voltage_kv": 5.0}),
    ("High Voltage = 1.5e4 V", {"accelerating_voltage_kv": 15.0}),
    ("HV: 20kV", {"accelerating_voltage_kv": 20.0}),
    ("Beam energy = 2 keV", {"accelerating_voltage_kv": 2.0}),  # E = eV for an electron
    ("LANDING_ENERGY = 500 V", {"accelerating_voltage_kv": 0.5}),
    ("Working Distance = 4.2 mm", {"working_distance_mm": 4.2}),
    ("WD: 4200 um", {"working_distance_mm": 4.2}),
    ("W.D. = 0.0042 m", {"working_distance_mm": 4.2}),
    ("WD (mm) = 7", {"working_distance_mm": 7.0}),
    ("Pixel Size = 2.5 nm", {"pixel_size_nm": 2.5}),
    ("pixel width: 2.5E-9 m", {"pixel_size_nm": 2.5}),
    ("Pixel size = 0.0025 µm", {"pixel_size_nm": 2.5}),  # U+00B5 micro sign
    ("Pixel size = 0.0025 μm", {"pixel_size_nm": 2.5}),  # U+03BC Greek mu
    ("Dwell time = 10 us", {"dwell_time_us": 10.0}),
    ("Dwell: 100 ns", {"dwell_time_us": 0.1}),
    ("dwell = 2 ms", {"dwell_time_us": 2000.0}),
    ("Dwell time: 3e-6 s", {"dwell_time_us": 3.0}),
    ("Magnification = 25000", {"magnification": 25000.0}),
    ("Mag: 25000 x", {"magnification": 25000.0}),
    ("Mag = x25000", {"magnification": 25000.0}),
    ("Mag = 25 kx", {"magnification": 25000.0}),
    ("Probe current = 50 pA", {"probe_current_na": 0.05}),
    ("Beam Current: 1.2 nA", {"probe_current_na": 1.2}),
    ("beam current = 2 uA", {"probe_current_na": 2000.0}),
    ("Probe current = 5e-11 A", {"probe_current_na": 0.05}),
    ("Spot size = 3", {"spot_size": 3.0}),
    ("Chamber pressure = 60 Pa", {"chamber_pressure_pa": 60.0}),
    ("Pressure: 6.0e-4 mbar", {"chamber_pressure_pa": 0.06}),
    ("pressure = 0.5 Torr", {"chamber_pressure_pa": 0.5 * TORR}),
    ("Pressure = 60 PA", {"chamber_pressure_pa": 60.0}),  # case folded within pressures only
    ("Vacuum mode = Low vacuum", {"vacuum_mode": "Low vacuum"}),
    ("Detector: SE2", {"detector": "SE2"}),
    ("Tilt = 52 deg", {"tilt_deg": 52.0}),
    ("Stage tilt = -10°", {"tilt_deg": -10.0}),
    ("Tilt = 0.5 rad", {"tilt_deg": math.degrees(0.5)}),
    ("WD = 4.1 mm (measured)", {"working_distance_mm": 4.1}),
]


@pytest.mark.parametrize(("text", "expected"), TEXT_BLOCKS, ids=[t for t, _ in TEXT_BLOCKS])
def test_text_block_table(text: str, expected: dict[str, float | str]) -> None:
    recognised, unknown = parse_text_block(text)
    assert recognised.keys() == expected.keys()
    for key, value in expected.items():
        if isinstance(value, str):
            assert recognised[key] == value
        else:
            assert recognised[key] == pytest.approx(value, rel=1e-12)
    assert unknown == {}


def test_full_block_with_sections_unknown_keys_and_duplicates() -> None:
    text = """
    [Beam]
    HV = 5.00 kV
    Spot = 3
    ; a comment line
    [Stage]
    WD = 4.1 mm
    Tilt = 0 deg
    Operator = demo-user
    HV = 10 kV
    [Scan]
    Dwell = 1 us
    Date: 2024:05:01 10:00:00
    Frame integration: 8
    """
    recognised, unknown = parse_text_block(text)
    assert recognised == {
        "accelerating_voltage_kv": 5.0,
        "spot_size": 3.0,
        "working_distance_mm": 4.1,
        "tilt_deg": 0.0,
        "dwell_time_us": 1.0,
    }
    assert unknown["Stage.Operator"] == "demo-user"
    assert unknown["Stage.HV"] == "10 kV"  # a later duplicate is kept, not dropped
    assert unknown["Scan.Date"] == "2024:05:01 10:00:00"
    assert unknown["Scan.Frame integration"] == "8"


def test_pascal_and_picoampere_are_told_apart_by_quantity() -> None:
    # SI symbols: Pa (pascal) and pA (picoampere) differ only by case.
    recognised, _ = parse_text_block("Pressure = 5 Pa\nProbe current = 5 pA")
    assert recognised["chamber_pressure_pa"] == 5.0
    assert recognised["probe_current_na"] == pytest.approx(0.005)


def test_unconvertible_values_are_not_recognised() -> None:
    recognised, unknown = parse_text_block("HV = 5 mm\nWD = far\nMag = 2,000 x")
    assert recognised == {}
    assert set(unknown) == {"HV", "WD", "Mag"}


def test_json_description_is_read_as_key_values() -> None:
    recognised, _ = parse_text_block('{"Beam": {"HV": "3 kV", "WD": 5}, "shape": [32, 64]}')
    assert recognised == {"accelerating_voltage_kv": 3.0, "working_distance_mm": 5.0}


def test_mapping_extends_and_overrides_names() -> None:
    text = "BeamKV = 7\nHV = 20000\nPressure = 12\nGunVac = 3"
    mapping = {
        "BeamKV": {"field": "accelerating_voltage_kv", "unit": "kV"},
        "HV": {"field": "accelerating_voltage_kv", "unit": "V"},
        "Pressure": {"field": None, "unit": None},  # this instrument's "Pressure" is the gun's
    }
    recognised, unknown = parse_text_block(text, mapping)
    assert recognised["accelerating_voltage_kv"] == 7.0
    assert "chamber_pressure_pa" not in recognised
    assert unknown == {"HV": "20000", "Pressure": "12", "GunVac": "3"}  # HV came second
    only_hv, _ = parse_text_block("HV = 20000", mapping)
    assert only_hv == {"accelerating_voltage_kv": 20.0}  # the mapping's unit V applies
    explicit, _ = parse_text_block("HV = 15 kV", mapping)
    assert explicit == {"accelerating_voltage_kv": 15.0}  # a unit in the file wins


def test_mapping_keys_are_matched_like_names_and_may_name_a_section() -> None:
    mapping = {"beam.hv": {"field": "accelerating_voltage_kv", "unit": "V"}}
    recognised, _ = parse_text_block("[Beam]\nHV = 3000\n[Gun]\nHV = 30000 V", mapping)
    assert recognised == {"accelerating_voltage_kv": 3.0}


@pytest.mark.parametrize(
    "mapping",
    [
        {"HV": {"field": "voltage"}},
        {"HV": {"field": "accelerating_voltage_kv", "unit": "mm"}},
        {"HV": "accelerating_voltage_kv"},
        {"HV": {"field": "detector", "unit": "kV"}},
        {"HV": {"field": "accelerating_voltage_kv", "scale": 2}},
        {"": {"field": "detector"}},
        ["HV"],
    ],
)
def test_malformed_mapping_is_refused(mapping: object) -> None:
    with pytest.raises(MappingError):
        parse_text_block("HV = 5 kV", mapping)  # type: ignore[arg-type]


# ------------------------------------------------------------------------ extract_metadata


def test_conditions_from_description_and_suspects() -> None:
    description = (
        "HV = 0 kV\nWD = -3 mm\nTilt = 120 deg\nMag = 5000 x\nDwell = 2 us\nDetector = BSE"
    )
    meta = meta_of(description=description)
    assert meta.conditions == {"magnification": 5000.0, "dwell_time_us": 2.0, "detector": "BSE"}
    assert set(meta.suspect) == {"accelerating_voltage_kv", "working_distance_mm", "tilt_deg"}
    assert "outside the plausible range" in meta.suspect["accelerating_voltage_kv"]


@pytest.mark.parametrize(
    ("kind", "kv", "plausible"),
    [
        # DOMAIN.md: SEM 1–30 kV (we allow down to 0.05 kV for beam deceleration); TEM ≤ 300 kV.
        ("SEM", 0.0, False),
        ("SEM", 0.1, True),
        ("SEM", 30.0, True),
        ("SEM", 500.0, False),
        ("SEM", 200.0, False),
        ("TEM", 200.0, True),
        ("TEM", 300.0, True),
        ("TEM", 500.0, False),
    ],
)
def test_voltage_plausibility_depends_on_instrument_kind(
    kind: str, kv: float, plausible: bool
) -> None:
    meta = extract_metadata(tiff(description=f"HV = {kv} kV"), instrument_kind=kind)
    assert ("accelerating_voltage_kv" in meta.conditions) is plausible
    assert ("accelerating_voltage_kv" in meta.suspect) is not plausible


def test_text_block_in_another_ascii_tag() -> None:
    # TIFF 6.0: private tags 65000–65535 are free for any use; type 2 = ASCII.
    meta = meta_of(extratags=[(65000, "s", 0, "[Optics]\nWD = 6 mm\nHV = 3 kV", True)])
    assert meta.conditions["working_distance_mm"] == 6.0
    assert meta.conditions["accelerating_voltage_kv"] == 3.0


@pytest.mark.parametrize(
    ("metadata", "expected_nm"),
    [
        ({"PhysicalSizeX": 2.5, "PhysicalSizeXUnit": "nm"}, 2.5),
        ({"PhysicalSizeX": 0.0125}, 12.5),  # OME schema: the default unit is µm
        ({"PhysicalSizeX": 5.0, "PhysicalSizeXUnit": "Å"}, 0.5),
        ({"PhysicalSizeX": 0.01, "PhysicalSizeXUnit": "mm"}, 1e4),
    ],
)
def test_ome_xml_physical_size(metadata: dict, expected_nm: float) -> None:
    meta = meta_of(ome=True, metadata=metadata)
    assert meta.pixel_size_source == "ome-xml"
    assert meta.pixel_size_nm == pytest.approx(expected_nm, rel=1e-12)
    assert meta.conditions["pixel_size_nm"] == pytest.approx(expected_nm, rel=1e-12)


def test_implausible_ome_size_is_suspect() -> None:
    meta = meta_of(ome=True, metadata={"PhysicalSizeX": 1.5, "PhysicalSizeXUnit": "mm"})
    assert meta.pixel_size_source == "none"  # 1.5 mm per pixel is a unit mistake
    assert "ome-xml" in meta.suspect["pixel_size_nm"]


def test_ome_with_dtd_is_not_parsed() -> None:
    description = (
        '<?xml version="1.0"?><!DOCTYPE OME [<!ENTITY a "aaaa">]>'
        '<OME><Image><Pixels PhysicalSizeX="2"/></Image></OME>'
    )
    meta = meta_of(description=description)
    assert meta.pixel_size_source == "none"
    assert "entit" in meta.suspect["pixel_size_nm"]


@pytest.mark.parametrize(
    ("resolution", "unit", "expected_nm"),
    [
        ((1e6, 1e6), "CENTIMETER", 10.0),  # 1 cm / 1e6 = 10 nm
        ((2.54e6, 2.54e6), "INCH", 10.0),  # 1 inch = 2.54 cm exactly
        ((4e5, 4e5), "CENTIMETER", 25.0),
    ],
)
def test_tiff_resolution_pixel_size(resolution: tuple, unit: str, expected_nm: float) -> None:
    meta = meta_of(resolution=resolution, resolutionunit=unit)
    assert meta.pixel_size_source == "tiff-resolution"
    assert meta.pixel_size_nm == pytest.approx(expected_nm, rel=1e-9)


@pytest.mark.parametrize(
    ("resolution", "unit"),
    [
        ((1, 1), "NONE"),  # TIFF 6.0: unit 1 = no absolute unit (aspect ratio only)
        ((72, 72), "INCH"),  # common print default, no information
        ((96, 96), "INCH"),
        ((72 / 2.54, 72 / 2.54), "CENTIMETER"),  # 72 dpi expressed per cm
        ((300, 300), "INCH"),
    ],
)
def test_uninformative_resolution_is_ignored(resolution: tuple, unit: str) -> None:
    meta = meta_of(resolution=resolution, resolutionunit=unit)
    assert (meta.pixel_size_source, meta.pixel_size_nm) == ("none", None)


def test_magnification_times_reference_width() -> None:
    # Definition: field width = reference width / magnification; pixel = field width / pixels.
    meta = meta_of(description="Mag = 10000 x", x_reference_width_mm=127.0)
    assert meta.pixel_size_source == "magnification"
    assert meta.pixel_size_nm == pytest.approx(127e6 / (10000 * 64), rel=1e-12)
    assert "pixel_size_nm" not in meta.conditions  # derived, not recorded in the file
    assert meta_of(description="Mag = 10000 x").pixel_size_source == "none"  # no width known


def test_order_of_trust() -> None:
    everything = dict(
        ome=True,
        metadata={"PhysicalSizeX": 2.0, "PhysicalSizeXUnit": "nm"},
        resolution=(1e6, 1e6),
        resolutionunit="CENTIMETER",
        extratags=[(65000, "s", 0, "Pixel size = 3 nm\nMag = 1000 x", True)],
    )
    assert meta_of(**everything).pixel_size_source == "ome-xml"
    caller = meta_of(**everything, x_pixel_size_nm=7.0)
    assert (caller.pixel_size_source, caller.pixel_size_nm) == ("caller", 7.0)
    assert caller.conditions["pixel_size_nm"] == 2.0  # what the file says is still reported
    no_ome = {k: v for k, v in everything.items() if k not in ("ome", "metadata")}
    assert meta_of(**no_ome).pixel_size_source == "text-block"
    assert meta_of(**no_ome).pixel_size_nm == 3.0
    res_only = {k: v for k, v in no_ome.items() if k != "extratags"}
    assert meta_of(**res_only).pixel_size_source == "tiff-resolution"
    mag_only = dict(extratags=[(65000, "s", 0, "Mag = 1000 x", True)], x_reference_width_mm=100.0)
    assert meta_of(**mag_only).pixel_size_source == "magnification"


def test_implausible_pixel_size_falls_through_to_the_next_source() -> None:
    meta = meta_of(
        description="Pixel size = 0 nm",
        resolution=(1e6, 1e6),
        resolutionunit="CENTIMETER",
    )
    assert meta.pixel_size_source == "tiff-resolution"
    assert "pixel_size_nm" in meta.suspect


def test_png_text_chunk_supplies_conditions() -> None:
    info = PngImagePlugin.PngInfo()
    info.add_text("Description", "HV = 2 kV\nWD = 3 mm\nPixel size = 4 nm")
    buffer = io.BytesIO()
    Image.fromarray(IMAGE).save(buffer, format="PNG", pnginfo=info)
    meta = extract_metadata(read_image(io.BytesIO(buffer.getvalue())))
    assert meta.conditions["accelerating_voltage_kv"] == 2.0
    assert (meta.pixel_size_nm, meta.pixel_size_source) == (4.0, "text-block")


def test_bad_caller_values_are_refused() -> None:
    with pytest.raises(ValueError):
        extract_metadata(tiff(), pixel_size_nm=0.0)
    with pytest.raises(ValueError):
        extract_metadata(tiff(), reference_width_mm=-1.0)


def test_no_metadata_at_all() -> None:
    meta = extract_metadata(tiff(metadata=None))
    assert meta == Metadata(conditions={}, pixel_size_nm=None, pixel_size_source="none")


# ------------------------------------------------------------------------ property tests

# Names from the issue text (issue 3, "Key/value text blocks") and SI factors to canonical units.
ISSUE_NAMES = {
    "accelerating_voltage_kv": [
        "accelerating voltage",
        "acc voltage",
        "high voltage",
        "HV",
        "beam energy",
        "landing energy",
    ],
    "working_distance_mm": ["working distance", "WD"],
    "pixel_size_nm": ["pixel size", "pixel width"],
    "dwell_time_us": ["dwell time", "dwell"],
    "magnification": ["magnification", "mag"],
    "probe_current_na": ["probe current", "beam current"],
    "chamber_pressure_pa": ["chamber pressure", "pressure"],
    "tilt_deg": ["tilt"],
}
SI_UNITS = {
    "accelerating_voltage_kv": {"kV": 1.0, "V": 1e-3, "keV": 1.0},
    "working_distance_mm": {"mm": 1.0, "µm": 1e-3, "um": 1e-3, "nm": 1e-6, "m": 1e3},
    "pixel_size_nm": {"nm": 1.0, "µm": 1e3, "um": 1e3, "mm": 1e6, "m": 1e9},
    "dwell_time_us": {"ns": 1e-3, "µs": 1.0, "us": 1.0, "ms": 1e3, "s": 1e6},
    "magnification": {"": 1.0, "x": 1.0},
    "probe_current_na": {"pA": 1e-3, "nA": 1.0, "µA": 1e3, "uA": 1e3, "A": 1e9},
    "chamber_pressure_pa": {"Pa": 1.0, "mbar": 100.0, "Torr": TORR},
    "tilt_deg": {"deg": 1.0, "": 1.0},
}


@st.composite
def spelled_name(draw: st.DrawFn, name: str) -> str:
    """The name with random case and random punctuation between letters (must not matter)."""
    out = []
    for ch in name:
        out.append(ch.upper() if draw(st.booleans()) else ch.lower())
        if ch != " " and draw(st.integers(0, 9)) == 0:
            out.append(draw(st.sampled_from("._-/")))
    return "".join(out).strip("._-/") or name


@st.composite
def entry(draw: st.DrawFn) -> tuple[str, str, float]:
    field = draw(st.sampled_from(sorted(ISSUE_NAMES)))
    key = draw(spelled_name(draw(st.sampled_from(ISSUE_NAMES[field]))))
    unit, factor = draw(st.sampled_from(sorted(SI_UNITS[field].items())))
    canonical = draw(st.floats(1e-3, 1e4, allow_nan=False))
    written = canonical / factor
    number = draw(st.sampled_from([repr(written), f"{written:.15e}", f"{written:.15E}"]))
    separator = draw(st.sampled_from(["=", ":", " = ", ": ", "\t=\t"]))
    space = draw(st.sampled_from(["", " "])) if unit else ""
    return f"{key}{separator}{number}{space}{unit}", field, canonical


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(entry())
def test_property_single_entry_round_trips(item: tuple[str, str, float]) -> None:
    line, field, canonical = item
    recognised, unknown = parse_text_block(line)
    assert recognised.keys() == {field}, line
    assert recognised[field] == pytest.approx(canonical, rel=1e-9), line
    assert unknown == {}


@settings(max_examples=150, deadline=None)
@given(
    st.lists(entry(), min_size=1, max_size=6),
    st.lists(st.sampled_from(["", "[Section A]", "# note", "; note", "[Optics]"]), max_size=6),
)
def test_property_sections_comments_and_blank_lines_do_not_change_values(
    items: list[tuple[str, str, float]], noise: list[str]
) -> None:
    lines = [line for line, _, _ in items]
    mixed: list[str] = []
    for i, line in enumerate(lines):
        if i < len(noise):
            mixed.append(noise[i])
        mixed.append(line)
    plain, _ = parse_text_block("\n".join(lines))
    noisy, _ = parse_text_block("\r\n".join(mixed))
    assert plain == noisy
    first: dict[str, float] = {}
    for _, field, value in items:
        first.setdefault(field, value)  # the first occurrence of a field wins
    assert plain.keys() == first.keys()
    for field, value in first.items():
        assert plain[field] == pytest.approx(value, rel=1e-9)


KNOWN = re.compile(
    r"^(acc|accel|high|hv|eht|beam|landing|work|wd|pixel|dwell|mag|probe|spot|chamber|pressure|"
    r"vacuum|detector|tilt|stage)",
    re.IGNORECASE,
)


@settings(max_examples=150, deadline=None)
@given(
    st.from_regex(r"[A-Za-z][A-Za-z0-9 _]{0,20}[A-Za-z0-9]", fullmatch=True).filter(
        lambda k: not KNOWN.match(k)
    ),
    st.from_regex(r"[A-Za-z0-9.,+\- ]{1,30}", fullmatch=True).map(str.strip).filter(bool),
)
def test_property_unknown_keys_are_kept(key: str, value: str) -> None:
    recognised, unknown = parse_text_block(f"{key} = {value}")
    assert recognised == {}
    assert unknown == {key: value}


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=400))
def test_property_arbitrary_text_never_raises(text: str) -> None:
    recognised, unknown = parse_text_block(text)
    assert set(recognised) <= set(FIELDS)
    assert all(isinstance(v, float | str) for v in recognised.values())
    assert all(isinstance(k, str) and isinstance(v, str) for k, v in unknown.items())


def test_hostile_long_lines_are_linear() -> None:
    import time

    started = time.perf_counter()
    parse_text_block("[" + " " * 200_000 + "[]\n" + "HV = " + "9" * 5000 + "\n" + "{" * 100_000)
    assert time.perf_counter() - started < 1.0  # common practice: no catastrophic backtracking
