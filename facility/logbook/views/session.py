"""The session page: what is in the chamber, how it is set up, the images and what they show.

Every form posts to its own small view that calls one logbook service; a refusal re-renders the
page with the service's words beside the form. Visibility is the logbook's `visible_to` (another
group's session is a 404); changing the log is for the operator and staff (others get a 403).
"""

from __future__ import annotations

import hashlib
from typing import Any

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import HttpRequest, HttpResponse, JsonResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.views.decorators.http import require_GET, require_POST

from facility.bookings.forms import show_refusal
from facility.errors import DomainError, NotAllowed
from facility.logbook import flags as flag_service
from facility.logbook import queries, services, uploads
from facility.logbook.forms import (
    CheckOutForm,
    CoatingForm,
    ConditionsForm,
    DismissForm,
    FaultForm,
    NewSpecimenForm,
    SessionSettingsForm,
    SpecimenChoiceForm,
)
from facility.logbook.models import AnalysisState, Flag, InstrumentSession, Severity
from facility.people.queries import is_staff

SEVERITY_RANK = {Severity.PROBLEM: 0, Severity.WARNING: 1, Severity.INFO: 2}


def _session(request: HttpRequest, pk: int) -> InstrumentSession:
    return get_object_or_404(queries.visible_to(request.user).select_related("booking"), pk=pk)


def _can_log(session: InstrumentSession, user) -> bool:
    return session.operator_id == user.pk or is_staff(user)


def _require_log(session: InstrumentSession, user) -> None:
    if not _can_log(session, user):
        raise PermissionDenied("Only the session's operator or facility staff can change its log.")


def _value(value: Any, names: dict[int, str]) -> str:
    if isinstance(value, float):
        return f"{value:.3g}"
    if isinstance(value, list):
        return ", ".join(names.get(v, str(v)) if isinstance(v, int) else str(v) for v in value)
    return str(value)


def evidence_lines(evidence: dict, names: dict[int, str]) -> list[tuple[str, str]]:
    """Flag evidence as (label, text) lines; micrograph ids are shown by their file names."""
    lines: list[tuple[str, str]] = []
    for key, value in (evidence or {}).items():
        label = key.replace("_", " ")
        if key in ("images", "micrograph"):
            label = "images" if key == "images" else "image"
            value = [value] if isinstance(value, int) else value
        if isinstance(value, dict):
            parts = []
            for sub, item in value.items():
                if sub == "micrograph" and isinstance(item, int):
                    parts.append(names.get(item, f"image {item}"))
                elif not isinstance(item, dict | list):
                    parts.append(f"{sub.replace('_', ' ')} {_value(item, names)}")
            lines.append((label, "; ".join(parts)))
        elif key == "cases" and isinstance(value, list):
            for case in value[:5]:
                lines.append(
                    (
                        names.get(case.get("micrograph"), "image"),
                        f"{str(case.get('field', '')).replace('_', ' ')}: logged "
                        f"{case.get('logged')}, image {case.get('image')}",
                    )
                )
        else:
            lines.append((label, _value(value, names)))
    return lines


def live_context(session: InstrumentSession, *, bound: dict | None = None) -> dict:
    """Images and flags: shown on the page and refreshed by the page's script while analysing."""
    micrographs = list(
        session.micrographs.prefetch_related("assessments").order_by("uploaded_at", "id")
    )
    for m in micrographs:
        # Assessments are ordered newest first (model Meta): the first is the current one.
        found = list(m.assessments.all())
        m.latest = found[0] if found else None
    names = {m.pk: str(m) for m in micrographs}
    flags = sorted(
        session.flags.select_related("dismissed_by"),
        key=lambda f: (f.is_dismissed, SEVERITY_RANK.get(f.severity, 3), f.code),
    )
    bound = bound or {}
    for flag in flags:
        flag.lines = evidence_lines(flag.evidence, names)
        flag.form = bound.get(flag.pk) or DismissForm(prefix=f"flag{flag.pk}")
    pending = sum(1 for m in micrographs if m.state == AnalysisState.PENDING)
    signature = hashlib.sha256(
        "|".join(f"{f.pk}:{f.computed_at.isoformat()}:{f.dismissed_at}" for f in flags).encode()
    ).hexdigest()[:16]
    return {
        "micrographs": micrographs,
        "flags": flags,
        "open_flags": sum(1 for f in flags if not f.is_dismissed),
        "pending": pending,
        "flag_signature": signature,
    }


def _page(
    request: HttpRequest, session: InstrumentSession, *, status: int = 200, **forms: Any
) -> HttpResponse:
    user = request.user
    can_log = _can_log(session, user)
    context: dict[str, Any] = {
        "session": session,
        "instrument": session.instrument,
        "can_log": can_log,
        "conditions": list(session.conditions.all()),
        "nav": "instruments",
        **live_context(session, bound=forms.pop("dismiss", None)),
    }
    if can_log:
        last = queries.last_conditions_for(session.operator, session.instrument_id)
        coating = session.coating
        context.update(
            {
                "pick_form": SpecimenChoiceForm(operator=session.operator, prefix="pick"),
                "new_specimen_form": NewSpecimenForm(prefix="new"),
                "coating_form": CoatingForm(
                    prefix="coat",
                    initial={
                        "material": coating.material,
                        "thickness_nm": coating.thickness_nm,
                        "method": coating.method,
                    }
                    if coating
                    else None,
                ),
                "settings_form": SessionSettingsForm(
                    instrument=session.instrument,
                    prefix="set",
                    initial={"vacuum_mode": session.vacuum_mode, "notes": session.notes},
                ),
                "conditions_form": ConditionsForm(
                    prefix="cond", initial=ConditionsForm.initial_from(last)
                ),
                "prefilled": last is not None,
                "fault_form": FaultForm(prefix="fault"),
                "checkout_form": CheckOutForm(),
                "may_upload": uploads.accepts_uploads_from(session, user),
            }
        )
        context.update(forms)
    return render(request, "logbook/session_detail.html", context, status=status)


@login_required
@require_GET
def session_detail(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    suggested = suggested_conditions(request)
    if suggested and _can_log(session, request.user):
        # The finder's "review them first" link: its suggestion fills the form, nothing is saved.
        form = ConditionsForm(prefix="cond", initial=suggested)
        return _page(request, session, conditions_form=form, prefilled=False, suggested=True)
    return _page(request, session)


def suggested_conditions(request: HttpRequest) -> dict[str, Any]:
    """Conditions handed over in the address (`?suggested=1&cond-...`), as the form's initial
    values; a value the form would refuse is left out rather than shown as an error."""
    if request.GET.get("suggested") != "1":
        return {}
    form = ConditionsForm(request.GET, prefix="cond")
    form.is_valid()
    return {k: v for k, v in form.cleaned_data.items() if v not in (None, "")}


@login_required
@require_GET
def session_live(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    context = {
        "session": session,
        "can_log": _can_log(session, request.user),
        **live_context(session),
    }
    return render(request, "logbook/_session_live.html", context)


def _done(request: HttpRequest, session: InstrumentSession, text: str, anchor: str):
    messages.success(request, text)
    return redirect(reverse("session-detail", args=[session.pk]) + f"#{anchor}")


def _refused(form, error: DomainError) -> int:
    if isinstance(error, NotAllowed):
        raise PermissionDenied(error.message)
    show_refusal(form, error)
    return error.http_status


@login_required
@require_POST
def session_specimen(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    _require_log(session, request.user)
    if "pick-specimen" in request.POST:
        form = SpecimenChoiceForm(request.POST, operator=session.operator, prefix="pick")
        key = "pick_form"
    else:
        form = NewSpecimenForm(request.POST, prefix="new")
        key = "new_specimen_form"
    if not form.is_valid():
        return _page(request, session, status=400, **{key: form})
    try:
        if key == "pick_form":
            specimen = services.record_specimen(
                session=session, by=request.user, specimen=form.cleaned_data["specimen"]
            )
        else:
            specimen = services.record_specimen(
                session=session, by=request.user, **form.service_fields()
            )
    except DomainError as error:
        return _page(request, session, status=_refused(form, error), **{key: form})
    return _done(request, session, f"Specimen recorded: {specimen}.", "specimen")


@login_required
@require_POST
def session_coating(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    _require_log(session, request.user)
    form = CoatingForm(request.POST, prefix="coat")
    if not form.is_valid():
        return _page(request, session, status=400, coating_form=form)
    data = form.cleaned_data
    try:
        coating = services.set_coating(
            session=session,
            by=request.user,
            material=data["material"],
            thickness_nm=data["thickness_nm"] or 0.0,
            method=data["method"],
        )
    except DomainError as error:
        return _page(request, session, status=_refused(form, error), coating_form=form)
    return _done(request, session, f"Coating recorded: {coating}.", "specimen")


@login_required
@require_POST
def session_settings(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    _require_log(session, request.user)
    form = SessionSettingsForm(request.POST, instrument=session.instrument, prefix="set")
    if not form.is_valid():
        return _page(request, session, status=400, settings_form=form)
    try:
        services.update_session(
            session=session,
            by=request.user,
            vacuum_mode=form.cleaned_data["vacuum_mode"],
            notes=form.cleaned_data["notes"],
        )
    except DomainError as error:
        return _page(request, session, status=_refused(form, error), settings_form=form)
    return _done(request, session, "Vacuum mode and notes saved.", "setup")


@login_required
@require_POST
def session_conditions(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    _require_log(session, request.user)
    form = ConditionsForm(request.POST, prefix="cond")
    if form.is_valid() and not form.values():
        form.add_error(None, "Enter at least one setting.")
    if not form.is_valid():
        return _page(request, session, status=400, conditions_form=form)
    try:
        services.add_conditions(session=session, by=request.user, **form.values())
    except DomainError as error:
        return _page(request, session, status=_refused(form, error), conditions_form=form)
    return _done(request, session, "Conditions logged.", "conditions")


@login_required
@require_POST
def session_fault(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    _require_log(session, request.user)
    form = FaultForm(request.POST, prefix="fault")
    if not form.is_valid():
        return _page(request, session, status=400, fault_form=form)
    try:
        told = services.report_fault(
            session=session, by=request.user, text=form.cleaned_data["fault_report"]
        )
    except DomainError as error:
        return _page(request, session, status=_refused(form, error), fault_form=form)
    return _done(
        request,
        session,
        f"Fault reported; {told} staff member{'s' if told != 1 else ''} told."
        if told
        else "Fault report saved; the staff had already been told about it.",
        "fault",
    )


def _wants_json(request: HttpRequest) -> bool:
    return "application/json" in request.headers.get("Accept", "")


@login_required
@require_POST
def session_upload(request: HttpRequest, pk: int) -> HttpResponse:
    session = _session(request, pk)
    files = request.FILES.getlist("files")
    results = []
    status = 200
    if not files:
        results.append({"name": "", "ok": False, "message": "Choose at least one image file."})
        status = 400
    for upload in files:
        try:
            micrograph, created = uploads.upload_micrograph(
                session=session, by=request.user, upload=upload, original_name=upload.name
            )
        except NotAllowed as error:
            raise PermissionDenied(error.message) from None
        except DomainError as error:
            results.append({"name": upload.name, "ok": False, "message": error.message})
            status = error.http_status if status == 200 else status
            continue
        results.append(
            {
                "name": upload.name,
                "ok": True,
                "created": created,
                "id": micrograph.pk,
                "message": "Added; analysing." if created else "Already in this session.",
            }
        )
    if _wants_json(request):
        return JsonResponse({"results": results}, status=status)
    for result in results:
        level = messages.SUCCESS if result["ok"] else messages.ERROR
        messages.add_message(request, level, f"{result['name']}: {result['message']}".strip(": "))
    return redirect(reverse("session-detail", args=[session.pk]) + "#images")


@login_required
@require_POST
def flag_dismiss(request: HttpRequest, pk: int) -> HttpResponse:
    flag: Flag = get_object_or_404(queries.flags_visible_to(request.user), pk=pk)
    session = _session(request, flag.session_id)
    _require_log(session, request.user)
    form = DismissForm(request.POST, prefix=f"flag{flag.pk}")
    if not form.is_valid():
        return _page(request, session, status=400, dismiss={flag.pk: form})
    try:
        flag_service.dismiss(flag=flag, by=request.user, reason=form.cleaned_data["reason"])
    except DomainError as error:
        status = _refused(form, error)
        return _page(request, session, status=status, dismiss={flag.pk: form})
    return _done(request, session, f"Flag “{flag.get_code_display()}” dismissed.", "flags")
