"""Upkeep pages for staff: every counter against its limit, one instrument's upkeep with charts,
the forms that record service events, meter readings and limits, alerts, and the audit export.

Thin: each form posts to a view that calls one upkeep service; a refusal re-renders the page with
the service's words beside the form. Upkeep is staff business (queries.may_view): anyone else
gets a 403 on every page here.
"""

from __future__ import annotations

import datetime as dt
from typing import Any
from urllib.parse import urlencode

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_GET, require_POST

from facility.bookings.forms import show_refusal
from facility.errors import DomainError, NotAllowed
from facility.instruments.models import Instrument, Pump
from facility.upkeep import audit, charts, queries, services
from facility.upkeep.forms import AuditForm, LimitForm, MeterReadingForm, ServiceEventForm
from facility.upkeep.models import Alert, Counter
from facility.upkeep.status import CounterStatus

RECENT_ROWS = 20  # service events and readings listed on an instrument's page


def _staff_only(request: HttpRequest) -> None:
    try:
        queries.may_view(request.user)
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None


def _instrument(code: str) -> Instrument:
    return get_object_or_404(Instrument, code=code)


def chart_url(status: CounterStatus) -> str:
    spec = status.spec
    params = {"counter": spec.counter}
    if spec.pump is not None:
        params["pump"] = str(spec.pump.pk)
    if spec.part:
        params["part"] = spec.part
    return f"{reverse('upkeep-chart', args=[spec.instrument.code])}?{urlencode(params)}"


NBSP = "\u00a0"  # keeps a figure and its unit on one line in narrow table cells


def _amount(value: float | None, unit: str) -> str:
    if value is None:
        return "–"
    return f"{value:,.0f}{NBSP}{unit}" if unit == "cycles" else f"{value:,.1f}{NBSP}{unit}"


STATE_WORDS = {
    "ok": ("within its rating", "ok"),
    "warn": ("past the warn level", "warning"),
    "over": ("past its rated life", "problem"),
    "unrated": ("no rating set", "info"),
}


def counter_row(status: CounterStatus) -> dict[str, Any]:
    """One counter as the pages show it: value, share of the rating, rates and forecast."""
    spec, info = status.spec, status.limit
    tz = timezone.get_current_timezone()
    words, tone = STATE_WORDS.get(status.state, (status.state, "info"))
    forecast = status.forecast
    rates = [
        (weeks, "–" if rate is None else f"{rate:.1f}{NBSP}{spec.unit}/week")
        for weeks, rate in status.rates.items()
    ]
    return {
        "status": status,
        "label": spec.label,
        "value": _amount(status.value, spec.unit),
        "rated": _amount(info.rated, spec.unit),
        "rated_source": ("default: " if info.is_default and info.rated else "") + info.source,
        "share": None if status.share is None else round(status.share * 100),
        "bar": None if status.share is None else min(100, round(status.share * 100)),
        "state": words,
        "tone": tone,
        "rates": rates,
        "forecast": forecast.describe(tz) if forecast else "no rating, no forecast",
        # The two dates behind "± n days", when they are at least a day apart.
        "forecast_range": (
            (timezone.localtime(forecast.earliest), timezone.localtime(forecast.latest))
            if forecast and forecast.plus_minus and forecast.plus_minus >= dt.timedelta(days=1)
            else None
        ),
        "since": status.since,
        "since_known": status.since_known,
        "drift": status.drift,
        "chart_url": chart_url(status),
    }


def instrument_rows(instrument: Instrument) -> list[dict[str, Any]]:
    return [counter_row(s) for s in queries.instrument_status(instrument)]


@login_required
@require_GET
def overview(request: HttpRequest) -> HttpResponse:
    _staff_only(request)
    instruments = list(Instrument.objects.filter(is_active=True))
    return render(
        request,
        "upkeep/overview.html",
        {
            "instruments": [
                (i, [counter_row(s) for s in statuses])
                for i, statuses in queries.facility_status(instruments)
            ],
            "alerts": list(queries.open_alerts()[:50]),
            "nav": "upkeep",
        },
    )


def _instrument_page(
    request: HttpRequest, instrument: Instrument, *, status: int = 200, **forms: Any
) -> HttpResponse:
    context: dict[str, Any] = {
        "instrument": instrument,
        "rows": instrument_rows(instrument),
        "alerts": list(queries.open_alerts(instrument)),
        "events": list(queries.service_events(instrument).reverse()[:RECENT_ROWS]),
        "readings": list(queries.meter_readings(instrument).reverse()[:RECENT_ROWS]),
        "limits": list(queries.limits_of(instrument)),
        "event_form": ServiceEventForm(instrument=instrument, prefix="event"),
        "reading_form": MeterReadingForm(instrument=instrument, prefix="reading"),
        "limit_form": LimitForm(instrument=instrument, prefix="limit"),
        "audit_form": AuditForm(initial=AuditForm.default_initial()),
        "nav": "upkeep",
    }
    context.update(forms)
    return render(request, "upkeep/instrument.html", context, status=status)


@login_required
@require_GET
def instrument_upkeep(request: HttpRequest, code: str) -> HttpResponse:
    _staff_only(request)
    return _instrument_page(request, _instrument(code))


def _refused(form, error: DomainError) -> int:
    if isinstance(error, NotAllowed):
        raise PermissionDenied(error.message)
    show_refusal(form, error)
    return error.http_status


def _done(request: HttpRequest, instrument: Instrument, text: str, anchor: str) -> HttpResponse:
    messages.success(request, text)
    return redirect(reverse("upkeep-instrument", args=[instrument.code]) + f"#{anchor}")


@login_required
@require_POST
def record_service_event(request: HttpRequest, code: str) -> HttpResponse:
    _staff_only(request)
    instrument = _instrument(code)
    form = ServiceEventForm(request.POST, instrument=instrument, prefix="event")
    if not form.is_valid():
        return _instrument_page(request, instrument, status=400, event_form=form)
    data = form.cleaned_data
    try:
        event = services.record_service_event(
            instrument=instrument,
            kind=data["kind"],
            performed_at=data["performed_at"],
            by=request.user,
            pump=data["pump"],
            part=data["part"],
            performed_by=data["performed_by"],
            notes=data["notes"],
            cost=data["cost"],
        )
    except DomainError as error:
        code_ = _refused(form, error)
        return _instrument_page(request, instrument, status=code_, event_form=form)
    return _done(request, instrument, f"Recorded: {event.get_kind_display().lower()}.", "events")


@login_required
@require_POST
def record_meter_reading(request: HttpRequest, code: str) -> HttpResponse:
    _staff_only(request)
    instrument = _instrument(code)
    form = MeterReadingForm(request.POST, instrument=instrument, prefix="reading")
    if not form.is_valid():
        return _instrument_page(request, instrument, status=400, reading_form=form)
    data = form.cleaned_data
    try:
        reading = services.record_meter_reading(
            instrument=instrument,
            counter=data["counter"],
            value=data["value"],
            read_at=data["read_at"],
            by=request.user,
            pump=data["pump"],
            note=data["note"],
        )
    except DomainError as error:
        code_ = _refused(form, error)
        return _instrument_page(request, instrument, status=code_, reading_form=form)
    return _done(request, instrument, f"Meter reading of {reading.value} h recorded.", "readings")


@login_required
@require_POST
def set_limit(request: HttpRequest, code: str) -> HttpResponse:
    _staff_only(request)
    instrument = _instrument(code)
    form = LimitForm(request.POST, instrument=instrument, prefix="limit")
    if not form.is_valid():
        return _instrument_page(request, instrument, status=400, limit_form=form)
    data = form.cleaned_data
    try:
        limit = services.set_limit(
            instrument=instrument,
            counter=data["counter"],
            rated=data["rated"],
            by=request.user,
            pump=data["pump"],
            part=data["part"],
            warn_percent=data["warn_percent"],
            note=data["note"],
        )
    except DomainError as error:
        code_ = _refused(form, error)
        return _instrument_page(request, instrument, status=code_, limit_form=form)
    return _done(
        request, instrument, f"Limit set: {limit.rated:g}, warn at {limit.warn_percent}%.", "limits"
    )


@login_required
@require_POST
def acknowledge_alert(request: HttpRequest, pk: int) -> HttpResponse:
    _staff_only(request)
    alert = get_object_or_404(Alert.objects.select_related("instrument"), pk=pk)
    try:
        services.acknowledge_alert(alert=alert, by=request.user)
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    messages.success(request, f"Alert acknowledged: {alert.message}")
    back = request.POST.get("next", "")
    allowed = {
        reverse("upkeep"),
        reverse("home"),
        reverse("upkeep-instrument", args=[alert.instrument.code]),
    }
    return redirect(back if back in allowed else reverse("upkeep"))


@login_required
@require_GET
def counter_chart(request: HttpRequest, code: str) -> HttpResponse:
    """One counter over the current part's life, with its limit and forecast, as SVG."""
    _staff_only(request)
    instrument = _instrument(code)
    counter = request.GET.get("counter", "")
    if counter not in Counter.values:
        raise Http404("No such counter.")
    pump = None
    if request.GET.get("pump", "").isdigit():
        pump = get_object_or_404(Pump, pk=int(request.GET["pump"]), instrument=instrument)
    spec = queries.spec_for(instrument, counter, pump=pump, part=request.GET.get("part", ""))
    status = queries.known_counter_status(spec)
    if status is None:
        raise Http404("This instrument has no such counter.")
    svg = charts.counter_chart(status)
    response = HttpResponse(svg, content_type="image/svg+xml")
    response["Cache-Control"] = "private, max-age=300"
    return response


@login_required
@require_GET
def audit_export(request: HttpRequest, code: str) -> HttpResponse:
    """The audit file of one instrument over a date range (CSV or PDF), as a download."""
    _staff_only(request)
    instrument = _instrument(code)
    form = AuditForm(request.GET)
    if not form.is_valid():
        return _instrument_page(request, instrument, status=400, audit_form=form)
    data = form.cleaned_data
    try:
        content, content_type, name = audit.export_for(
            request.user, instrument, data["first_day"], data["last_day"], fmt=data["format"]
        )
    except DomainError as error:
        code_ = _refused(form, error)
        return _instrument_page(request, instrument, status=code_, audit_form=form)
    response = HttpResponse(content, content_type=content_type)
    response["Content-Disposition"] = f'attachment; filename="{name}"'
    return response
