"""Analysing one micrograph: read, metadata, thumbnail, assessment, then the session's flags.

Called by the `analyse_micrograph` task (and by `manage.py reanalyse`). Safe to run twice: a
micrograph already assessed with the current analysis version is left as it is unless forced.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import io
import logging
import shutil
import tempfile
from typing import Any

from django.conf import settings
from django.core.files.base import ContentFile
from django.core.files.storage import default_storage
from django.db import transaction
from django.utils import timezone

from facility.logbook import flags as session_flags
from facility.logbook.models import (
    AnalysisState,
    Assessment,
    Conditions,
    ConditionsSource,
    Micrograph,
)
from facility.micrograph import assess as assess_module
from facility.micrograph.metadata import Metadata, extract_metadata
from facility.micrograph.read import ImageReadError, LoadedImage, read_image
from facility.micrograph.thumbnail import make_thumbnail

log = logging.getLogger(__name__)

CONDITION_FIELDS = (
    "accelerating_voltage_kv",
    "working_distance_mm",
    "probe_current_na",
    "spot_size",
    "detector",
    "dwell_time_us",
    "magnification",
    "vacuum_mode",
    "chamber_pressure_pa",
    "tilt_deg",
)


IN_MEMORY_BYTES = 64 * 1024 * 1024


class PermanentAnalysisError(Exception):
    """The file itself cannot be analysed; retrying will not help."""


def assess_settings() -> assess_module.AssessSettings:
    names = {f.name for f in dataclasses.fields(assess_module.AssessSettings)}
    values = {k: v for k, v in settings.ANALYSIS_THRESHOLDS.items() if k in names}
    return assess_module.AssessSettings(**values)


def _load(micrograph: Micrograph) -> LoadedImage:
    # Through the storage API (the worker may not share the web server's disk). Small files are
    # read into memory; large ones go to a named temporary file, since TIFF readers must seek.
    with default_storage.open(micrograph.file.name, "rb") as source:
        if micrograph.size_bytes and micrograph.size_bytes <= IN_MEMORY_BYTES:
            return _read(io.BytesIO(source.read()))
        with tempfile.NamedTemporaryFile(suffix=".img") as local:
            shutil.copyfileobj(source, local, 1024 * 1024)
            local.flush()
            local.seek(0)
            return _read(local)


def _read(handle) -> LoadedImage:
    try:
        return read_image(handle, max_pixels=settings.UPLOAD_MAX_PIXELS)
    except ImageReadError as exc:
        raise PermanentAnalysisError(str(exc)) from None
    except MemoryError:
        raise PermanentAnalysisError("the image is too large to analyse") from None


def _mismatches(logged: Conditions | None, found: dict[str, Any]) -> list[dict[str, Any]]:
    if logged is None:
        return []
    tolerance = settings.METADATA_MISMATCH_TOLERANCE
    out = []
    for name in CONDITION_FIELDS:
        ours, theirs = getattr(logged, name), found.get(name)
        if ours in (None, "") or theirs in (None, ""):
            continue
        if isinstance(theirs, str) or isinstance(ours, str):
            if name == "detector":
                continue  # detector names are free text that varies by instrument
            if str(ours).strip().lower() != str(theirs).strip().lower():
                out.append({"field": name, "logged": ours, "image": theirs})
        elif abs(float(ours) - float(theirs)) > tolerance * max(abs(float(theirs)), 1e-12):
            out.append({"field": name, "logged": ours, "image": float(theirs)})
    return out


def _fill_conditions(micrograph: Micrograph, meta: Metadata) -> tuple[Conditions, list[str]]:
    """Link the micrograph to its conditions and fill blanks from the file; returns filled names."""
    found = {k: v for k, v in meta.conditions.items() if k in CONDITION_FIELDS}
    logged = micrograph.conditions
    if logged is None:
        logged = micrograph.session.conditions.order_by("-id").first()
    if logged is None:
        created = Conditions.objects.create(
            session=micrograph.session, source=ConditionsSource.IMAGE, label="from image", **found
        )
        return created, sorted(found)
    filled = []
    for name, value in found.items():
        if getattr(logged, name) in (None, ""):
            setattr(logged, name, value)
            filled.append(name)
    if filled:
        logged.save(update_fields=filled)
    return logged, filled


def analyse(*, micrograph_id: int, force: bool = False) -> Micrograph:
    """Run the whole analysis of one micrograph and recompute its session's flags."""
    micrograph = Micrograph.objects.select_related("session__instrument").get(pk=micrograph_id)
    version = assess_module.ANALYSIS_VERSION
    if (
        not force
        and micrograph.state == AnalysisState.DONE
        and micrograph.assessments.filter(analysis_version=version).exists()
    ):
        return micrograph
    Micrograph.objects.filter(pk=micrograph.pk).update(
        analysis_attempts=micrograph.analysis_attempts + 1
    )
    instrument = micrograph.session.instrument
    try:
        loaded = _load(micrograph)
        meta = extract_metadata(
            loaded,
            mapping=instrument.metadata_mapping or None,
            reference_width_mm=instrument.magnification_reference_width_mm,
            instrument_kind="TEM" if instrument.kind == "TEM" else "SEM",
        )
        result = assess_module.assess(
            loaded.data, pixel_size_nm=meta.pixel_size_nm, settings=assess_settings()
        )
        thumbnail = make_thumbnail(loaded.data)
    except PermanentAnalysisError as exc:
        return mark_failed(micrograph_id=micrograph.pk, reason=f"Unreadable image: {exc}")
    except (ValueError, FloatingPointError) as exc:
        # A file that reads but breaks the computation is a property of the file, not a glitch.
        log.exception("analysis of micrograph %s failed", micrograph.pk)
        return mark_failed(micrograph_id=micrograph.pk, reason=f"Analysis failed: {exc}")
    thumb_name = f"thumbnails/{micrograph.sha256[:2]}/{micrograph.sha256}.png"
    if not default_storage.exists(thumb_name):
        default_storage.save(thumb_name, ContentFile(thumbnail))
    with transaction.atomic():
        micrograph = Micrograph.objects.select_for_update().get(pk=micrograph.pk)
        conditions, filled = _fill_conditions(micrograph, meta)
        mismatches = _mismatches(conditions, meta.conditions)
        data = result.to_dict()
        Assessment.objects.update_or_create(
            micrograph=micrograph,
            analysis_version=version,
            defaults={
                "sigma_px": data.get("sigma_px"),
                "resolution_px": data.get("resolution_px"),
                "resolution_nm": data.get("resolution_nm"),
                "astigmatism_ratio": data.get("astigmatism_ratio"),
                "astigmatism_angle_deg": data.get("astigmatism_angle_deg"),
                "charging_score": data.get("charging_score"),
                "saturated_fraction": data.get("saturated_fraction"),
                "pixel_limited": bool(data.get("pixel_limited")),
                "evidence": data.get("evidence") or {},
                "flags": list(data.get("flags") or []),
            },
        )
        micrograph.conditions = conditions
        micrograph.thumbnail = thumb_name
        micrograph.width = loaded.header.width
        micrograph.height = loaded.header.height
        micrograph.bit_depth = loaded.header.bit_depth
        micrograph.pages = loaded.header.pages
        micrograph.pixel_size_nm = meta.pixel_size_nm
        micrograph.pixel_size_source = meta.pixel_size_source
        micrograph.metadata = {
            "conditions": meta.conditions,
            "suspect": meta.suspect,
            "extra": dict(list(meta.extra.items())[:200]),
            "filled": filled,
            "mismatches": mismatches,
        }
        micrograph.state = AnalysisState.DONE
        micrograph.failure_reason = ""
        micrograph.analysed_at = timezone.now()
        micrograph.save()
        session_flags.recompute(session=micrograph.session)
    return micrograph


def mark_failed(*, micrograph_id: int, reason: str) -> Micrograph:
    """Record why a micrograph could not be analysed (it never stays pending)."""
    with transaction.atomic():
        micrograph = Micrograph.objects.select_for_update().get(pk=micrograph_id)
        micrograph.state = AnalysisState.FAILED
        micrograph.failure_reason = reason[:2000] or "unknown failure"
        micrograph.analysed_at = timezone.now()
        micrograph.save(update_fields=["state", "failure_reason", "analysed_at"])
    return micrograph


def stale_pending_ids() -> list[int]:
    """Micrographs pending for longer than the setting: their queue message was probably lost."""
    cutoff = timezone.now() - dt.timedelta(minutes=settings.ANALYSIS_STALE_MINUTES)
    return list(
        Micrograph.objects.filter(state=AnalysisState.PENDING, uploaded_at__lt=cutoff).values_list(
            "id", flat=True
        )[:500]
    )


def give_up_on_repeated_failures() -> int:
    """Micrographs whose analysis was started too often (e.g. killed the worker) become failed."""
    return Micrograph.objects.filter(
        state=AnalysisState.PENDING, analysis_attempts__gte=settings.ANALYSIS_MAX_ATTEMPTS
    ).update(
        state=AnalysisState.FAILED,
        failure_reason="Analysis was attempted too many times without finishing.",
        analysed_at=timezone.now(),
    )
