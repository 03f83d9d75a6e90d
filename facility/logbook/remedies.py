"""What to change next time, chosen from the session's own settings. Our own wording.

Each function returns a list of short, concrete suggestions; the flag service attaches them.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class SessionSettings:
    """The settings a remedy can refer to (the highest voltage, the longest WD, ...)."""

    voltage_kv: float | None
    working_distance_mm: float | None
    probe_current_na: float | None
    dwell_time_us: float | None
    vacuum_mode: str
    offers_low_vacuum: bool
    coated: bool
    coating_nm: float
    e2_kev: float | None
    beam_sensitive: bool
    eds_planned: bool
    feature_size_nm: float | None


def _kv(value: float) -> str:
    return f"{value:g} kV"


def for_charging(s: SessionSettings) -> list[str]:
    out = []
    if s.voltage_kv is not None and s.e2_kev is not None and s.voltage_kv > s.e2_kev:
        low = max(0.5, round(s.e2_kev * 0.7, 1))
        out.append(
            f"Lower the accelerating voltage from {_kv(s.voltage_kv)} to about "
            f"{low:g}–{s.e2_kev:g} kV: at or just under this material's second crossover "
            f"(≈ {s.e2_kev:g} keV) the surface stops building up negative charge."
        )
    elif s.voltage_kv is not None and s.voltage_kv > 2:
        out.append(f"Try a lower accelerating voltage than {_kv(s.voltage_kv)} (1–2 kV).")
    if not s.coated:
        if s.eds_planned:
            out.append(
                "Coat with 10–20 nm of evaporated carbon before imaging; carbon keeps the X-ray "
                "spectrum clean for EDS."
            )
        else:
            out.append(
                "Sputter-coat 5–10 nm of Au/Pd (or 10–20 nm of carbon if EDS will follow), and make "
                "sure the coating reaches the stub."
            )
    elif s.coating_nm < 5:
        out.append(
            f"The {s.coating_nm:g} nm coating may be too thin or broken; add a few nm more and "
            "check it is continuous down to the stub."
        )
    if s.vacuum_mode == "high" and s.offers_low_vacuum:
        out.append(
            "Switch to low-vacuum mode (tens of Pa) with the backscatter or gaseous SE detector: "
            "the gas carries the surface charge away."
        )
    if s.probe_current_na is not None:
        out.append(
            f"Reduce the probe current below {s.probe_current_na:g} nA (a smaller spot or "
            "aperture)."
        )
    else:
        out.append("Reduce the probe current (a smaller spot size or aperture).")
    if s.dwell_time_us is not None and s.dwell_time_us > 1:
        out.append(
            f"Scan faster than {s.dwell_time_us:g} µs per pixel and average several frames or "
            "lines instead of one slow pass."
        )
    else:
        out.append("Use a short dwell time and average frames rather than one slow scan.")
    out.append(
        "Ground the specimen: run conductive tape or silver/carbon paint from its top surface "
        "to the stub."
    )
    return out


def for_low_resolution(s: SessionSettings, *, along_scan: bool = False) -> list[str]:
    out = [
        "Refocus on a fine feature at a higher magnification than the final image, then return.",
        "Correct the stigmation (both stigmators) at that magnification.",
    ]
    if s.working_distance_mm is not None and s.working_distance_mm > 6:
        out.append(
            f"Shorten the working distance from {s.working_distance_mm:g} mm to about 3–5 mm "
            "(less depth of field, a finer probe)."
        )
    out.append("Use a smaller final aperture or spot size for a finer probe.")
    if along_scan:
        out.append(
            "The blur runs along the scan lines: let the stage settle, check for vibration and "
            "stray fields, or scan faster with line averaging."
        )
    else:
        out.append("Check for drift or vibration (wait after moving the stage; rescan).")
    if s.voltage_kv is not None and s.voltage_kv < 5 and not s.beam_sensitive:
        out.append(
            f"If surface detail is not the goal, a higher voltage than {_kv(s.voltage_kv)} gives "
            "a finer probe."
        )
    return out


def for_astigmatism(s: SessionSettings, *, along_scan: bool) -> list[str]:
    if along_scan:
        return [
            "The elongation lies along the scan lines, which points to drift or vibration rather "
            "than the stigmators: let the stage settle and scan faster with averaging.",
            "Then check the stigmation at high magnification.",
        ]
    return [
        "Correct the stigmators: at high magnification, focus through; if the image stretches "
        "one way and then the other, adjust X and Y stigmation until it only blurs evenly.",
        "Check the aperture alignment (wobble) before the stigmation.",
    ]


def for_coating_hides_features(s: SessionSettings) -> list[str]:
    target = (s.feature_size_nm or 0) / 5 if s.feature_size_nm else None
    out = []
    if target:
        out.append(
            f"Use a thinner coating: at most about {target:.3g} nm for features of "
            f"{s.feature_size_nm:g} nm."
        )
    out.append("Use a fine-grained target (Pt, Ir or Cr, 1–5 nm) for high-resolution work.")
    if s.offers_low_vacuum:
        out.append("Or image uncoated in low-vacuum mode.")
    out.append("Or image uncoated at a low voltage near the specimen's second crossover.")
    return out


def for_metadata_mismatch(mismatches: list[dict]) -> list[str]:
    lines = [
        f"Check {m['field'].replace('_', ' ')}: logged {m['logged']}, the image says {m['image']}."
        for m in mismatches[:5]
    ]
    lines.append("Correct the session's conditions if the image is right.")
    return lines


def for_saturated() -> list[str]:
    return [
        "Lower the contrast (detector gain) or raise the brightness offset so that highlights "
        "are not clipped.",
    ]


def for_pixel_limited() -> list[str]:
    return [
        "The probe is finer than the pixels: increase the magnification or pixel count if finer "
        "detail matters; the resolution figure is then only an upper bound.",
    ]
