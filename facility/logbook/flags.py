"""Session flags, recomputed from all of a session's images and from its settings.

`recompute(session=...)` is the one place flags are written: it upserts one flag per code, keeps
a person's dismissal (who and why), removes flags whose cause is gone, and tells the operator
about problems that are new.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from django.conf import settings
from django.contrib.auth.models import AbstractBaseUser
from django.db import transaction
from django.utils import timezone

from facility.errors import Invalid, NotAllowed
from facility.logbook import remedies
from facility.logbook.models import (
    AnalysisState,
    Assessment,
    CoatingMaterial,
    Conductivity,
    Flag,
    FlagCode,
    InstrumentSession,
    Severity,
)
from facility.people.queries import is_staff
from facility.people.services import notify


@dataclass
class Finding:
    code: str
    severity: str
    message: str
    evidence: dict[str, Any] = field(default_factory=dict)
    remedies: list[str] = field(default_factory=list)


def _max(values):
    numbers = [v for v in values if v is not None]
    return max(numbers) if numbers else None


def session_settings(session: InstrumentSession) -> remedies.SessionSettings:
    conditions = list(session.conditions.all())
    specimen = session.specimen
    coating = session.coating
    coated = bool(
        coating
        and coating.material != CoatingMaterial.NONE
        and coating.thickness_nm >= settings.CHARGING_MIN_COATING_NM
    )
    tags = [str(t).lower() for t in (specimen.tags if specimen else [])]
    modes = {c.vacuum_mode for c in conditions if c.vacuum_mode} or {session.vacuum_mode}
    return remedies.SessionSettings(
        voltage_kv=_max(c.accelerating_voltage_kv for c in conditions),
        working_distance_mm=_max(c.working_distance_mm for c in conditions),
        probe_current_na=_max(c.probe_current_na for c in conditions),
        dwell_time_us=_max(c.dwell_time_us for c in conditions),
        vacuum_mode="high" if "high" in modes else sorted(modes)[0],
        offers_low_vacuum=bool(
            {"low", "environmental"} & set(session.instrument.vacuum_modes or [])
        ),
        coated=coated,
        coating_nm=coating.thickness_nm if coating else 0.0,
        e2_kev=_e2(specimen),
        beam_sensitive=bool(specimen and specimen.beam_sensitive),
        eds_planned="eds" in tags,
        feature_size_nm=specimen.feature_size_nm if specimen else None,
    )


def _e2(specimen) -> float | None:
    if specimen is None:
        return None
    if specimen.e2_kev:
        return specimen.e2_kev
    return settings.DEFAULT_E2_KEV.get(specimen.material_class)


def charging_risk(session: InstrumentSession, s: remedies.SessionSettings) -> Finding | None:
    """Before any image: an insulating, uncoated specimen in high vacuum above its E2."""
    specimen = session.specimen
    if specimen is None or specimen.conductivity == Conductivity.CONDUCTING:
        return None
    if s.coated or s.vacuum_mode != "high" or s.voltage_kv is None or s.e2_kev is None:
        return None
    if s.voltage_kv <= s.e2_kev:
        return None
    source = "the specimen's" if specimen.e2_kev else f"a default for {specimen.material_class}"
    return Finding(
        code=FlagCode.CHARGING_RISK,
        severity=Severity.WARNING,
        message=(
            f"Likely to charge: {specimen.get_conductivity_display().lower()}, uncoated, high "
            f"vacuum, {s.voltage_kv:g} kV above E2 ≈ {s.e2_kev:g} keV ({source})."
        ),
        evidence={
            "conductivity": specimen.conductivity,
            "coating_nm": s.coating_nm,
            "vacuum_mode": s.vacuum_mode,
            "voltage_kv": s.voltage_kv,
            "e2_kev": s.e2_kev,
            "e2_source": "specimen" if specimen.e2_kev else "material-class default",
        },
        remedies=remedies.for_charging(s),
    )


def coating_hides_features(s: remedies.SessionSettings) -> Finding | None:
    if not s.coated or not s.feature_size_nm:
        return None
    if s.coating_nm <= settings.COATING_FEATURE_RATIO * s.feature_size_nm:
        return None
    return Finding(
        code=FlagCode.COATING_HIDES_FEATURES,
        severity=Severity.WARNING,
        message=(
            f"A {s.coating_nm:g} nm coating is not well below the {s.feature_size_nm:g} nm "
            "features of interest and may hide them."
        ),
        evidence={"coating_nm": s.coating_nm, "feature_size_nm": s.feature_size_nm},
        remedies=remedies.for_coating_hides_features(s),
    )


def _image_findings(session: InstrumentSession, s: remedies.SessionSettings) -> list[Finding]:
    from facility.micrograph.assess import ANALYSIS_VERSION

    rows = list(
        Assessment.objects.filter(
            micrograph__session=session,
            micrograph__state=AnalysisState.DONE,
            analysis_version=ANALYSIS_VERSION,
        ).select_related("micrograph")
    )
    total = len(rows)
    findings = []

    def having(code: str) -> list[Assessment]:
        return [a for a in rows if code in (a.flags or [])]

    charged = having("charging")
    if charged:
        worst = max(charged, key=lambda a: a.charging_score or 0)
        findings.append(
            Finding(
                code=FlagCode.CHARGING,
                severity=Severity.PROBLEM,
                message=f"Charging in {len(charged)} of {total} images "
                f"(strongest score {worst.charging_score:.2f} in {worst.micrograph}).",
                evidence={
                    "images": [a.micrograph_id for a in charged],
                    "count": len(charged),
                    "of": total,
                    "strongest": {
                        "micrograph": worst.micrograph_id,
                        "score": worst.charging_score,
                        **(worst.evidence.get("charging") or {}),
                    },
                },
                remedies=remedies.for_charging(s),
            )
        )
    blurred = having("low_resolution")
    if blurred:
        worst = max(blurred, key=lambda a: a.resolution_px or 0)
        along = any(_along_scan(a) for a in blurred)
        size = (
            f"{worst.resolution_nm:.3g} nm"
            if worst.resolution_nm
            else f"{worst.resolution_px:.3g} px"
        )
        findings.append(
            Finding(
                code=FlagCode.LOW_RESOLUTION,
                severity=Severity.PROBLEM,
                message=f"Low resolution in {len(blurred)} of {total} images (worst edge rise "
                f"{size}, in {worst.micrograph}).",
                evidence={
                    "images": [a.micrograph_id for a in blurred],
                    "count": len(blurred),
                    "of": total,
                    "worst": {
                        "micrograph": worst.micrograph_id,
                        "resolution_px": worst.resolution_px,
                        "resolution_nm": worst.resolution_nm,
                    },
                },
                remedies=remedies.for_low_resolution(s, along_scan=along),
            )
        )
    stretched = having("astigmatism")
    if stretched:
        worst = max(stretched, key=lambda a: a.astigmatism_ratio or 0)
        along = _along_scan(worst)
        findings.append(
            Finding(
                code=FlagCode.ASTIGMATISM,
                severity=Severity.WARNING,
                message=f"Astigmatism in {len(stretched)} of {total} images (ratio "
                f"{worst.astigmatism_ratio:.2f} at {worst.astigmatism_angle_deg:.0f}°"
                + (", along the scan lines" if along else "")
                + ").",
                evidence={
                    "images": [a.micrograph_id for a in stretched],
                    "worst": {
                        "micrograph": worst.micrograph_id,
                        "ratio": worst.astigmatism_ratio,
                        "angle_deg": worst.astigmatism_angle_deg,
                        "along_scan_lines": along,
                    },
                },
                remedies=remedies.for_astigmatism(s, along_scan=along),
            )
        )
    for code, make in (
        ("saturated", remedies.for_saturated),
        ("pixel_limited", remedies.for_pixel_limited),
    ):
        hit = having(code)
        if hit:
            findings.append(
                Finding(
                    code=code,
                    severity=Severity.INFO,
                    message=f"{FlagCode(code).label} in {len(hit)} of {total} images.",
                    evidence={"images": [a.micrograph_id for a in hit]},
                    remedies=make(),
                )
            )
    mismatched = [
        (m.pk, x)
        for m in session.micrographs.filter(state=AnalysisState.DONE)
        for x in (m.metadata or {}).get("mismatches", [])
    ]
    if mismatched:
        fields = sorted({x["field"] for _, x in mismatched})
        findings.append(
            Finding(
                code=FlagCode.METADATA_MISMATCH,
                severity=Severity.WARNING,
                message="Logged settings disagree with the images: "
                + "; ".join(
                    f"{x['field'].replace('_', ' ')} logged {x['logged']}, image {x['image']}"
                    for _, x in mismatched[:3]
                )
                + ".",
                evidence={
                    "fields": fields,
                    "cases": [{"micrograph": pk, **x} for pk, x in mismatched[:50]],
                },
                remedies=remedies.for_metadata_mismatch([x for _, x in mismatched]),
            )
        )
    return findings


def _along_scan(assessment: Assessment) -> bool:
    evidence = (assessment.evidence or {}).get("astigmatism") or {}
    return bool(evidence.get("along_scan_lines") or evidence.get("along_scan"))


def findings_for(session: InstrumentSession) -> list[Finding]:
    s = session_settings(session)
    found = [charging_risk(session, s), coating_hides_features(s)]
    found.extend(_image_findings(session, s))
    return [f for f in found if f is not None]


def recompute(*, session: InstrumentSession, notify_operator: bool = True) -> list[Flag]:
    """Bring the session's flags in line with its settings and images."""
    with transaction.atomic():
        session = InstrumentSession.objects.select_for_update().get(pk=session.pk)
        findings = {f.code: f for f in findings_for(session)}
        existing = {flag.code: flag for flag in session.flags.filter(micrograph__isnull=True)}
        kept: list[Flag] = []
        new_problems: list[Flag] = []
        for code, finding in findings.items():
            flag = existing.get(code)
            values = {
                "severity": finding.severity,
                "message": finding.message[:300],
                "evidence": finding.evidence,
                "remedies": finding.remedies,
            }
            if flag is None:
                flag = Flag.objects.create(session=session, code=code, **values)
                if finding.severity == Severity.PROBLEM:
                    new_problems.append(flag)
            elif any(getattr(flag, k) != v for k, v in values.items()):
                for name, value in values.items():
                    setattr(flag, name, value)
                flag.save()
            kept.append(flag)
        for code, flag in existing.items():
            if code not in findings:
                flag.delete()
        if notify_operator:
            for flag in new_problems:
                _tell(flag)
        return kept


def _tell(flag: Flag) -> None:
    session = flag.session
    transaction.on_commit(
        lambda: notify(
            user=session.operator,
            subject=f"{flag.get_code_display()} on your {session.instrument.name} session",
            body=flag.message + "\n\nWhat to change:\n- " + "\n- ".join(flag.remedies),
            link=f"/sessions/{session.pk}/",
            topic=f"flag:{flag.pk}",
        )
    )


def dismiss(*, flag: Flag, by: AbstractBaseUser, reason: str) -> Flag:
    """A person decides a flag does not matter here; who and why are kept."""
    reason = (reason or "").strip()
    if not reason:
        raise Invalid("Say why the flag does not apply.", fields={"reason": ["Required."]})
    if flag.session.operator_id != by.id and not is_staff(by):
        raise NotAllowed("Only the session's operator or facility staff can dismiss its flags.")
    with transaction.atomic():
        flag = Flag.objects.select_for_update().get(pk=flag.pk)
        flag.dismissed_at = timezone.now()
        flag.dismissed_by = by
        flag.dismiss_reason = reason[:300]
        flag.save(update_fields=["dismissed_at", "dismissed_by", "dismiss_reason"])
        return flag
