"""At the microscope: one large check-in or check-out page per instrument.

Gloves on, one hand free: one decision per screen, big targets, and every refusal said in words.
"""

from __future__ import annotations

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.utils.http import url_has_allowed_host_and_scheme
from django.views.decorators.http import require_GET, require_POST

from facility.bookings.models import Booking, BookingState
from facility.errors import DomainError, NotAllowed
from facility.instruments.models import Instrument, TrainingRecord
from facility.logbook import queries, services
from facility.logbook.forms import CheckInForm, CheckOutForm
from facility.people.queries import is_staff


def _current_booking(user, instrument: Instrument) -> Booking | None:
    # The same window the check-in service accepts: from EARLY_CHECK_IN before the start.
    now = timezone.now()
    return (
        Booking.objects.filter(
            user=user,
            instrument=instrument,
            state__in=(BookingState.REQUESTED, BookingState.CONFIRMED),
            starts_at__lte=now + services.EARLY_CHECK_IN,
            ends_at__gt=now,
        )
        .order_by("starts_at")
        .first()
    )


@login_required
@require_GET
def station(request: HttpRequest, code: str) -> HttpResponse:
    instrument = get_object_or_404(Instrument, code=code, is_active=True)
    session = queries.open_session(instrument.pk)
    mine = session is not None and session.operator_id == request.user.pk
    context = {
        "instrument": instrument,
        "session": session,
        "mine": mine,
        "staff": is_staff(request.user),
        "nav": "instruments",
    }
    if session is not None:
        context["checkout_form"] = CheckOutForm()
    else:
        context["booking"] = _current_booking(request.user, instrument)
        context["checkin_form"] = CheckInForm(user=request.user)
        context["training"] = TrainingRecord.objects.filter(
            user=request.user, instrument=instrument
        ).first()
    return render(request, "logbook/station.html", context)


@login_required
@require_POST
def check_in(request: HttpRequest, code: str) -> HttpResponse:
    instrument = get_object_or_404(Instrument, code=code, is_active=True)
    booking = None
    if request.POST.get("booking", "").isdigit():
        booking = get_object_or_404(
            Booking.objects.filter(user=request.user), pk=int(request.POST["booking"])
        )
    form = CheckInForm(request.POST, user=request.user)
    form.is_valid()  # a walk-up without an account is refused by the service, in words
    try:
        session = services.check_in(
            user=request.user,
            instrument=instrument,
            booking=booking,
            account=form.cleaned_data.get("account"),
            purpose=form.cleaned_data.get("purpose") or None,
        )
    except DomainError as error:
        messages.error(request, error.message)
        return redirect("station", code=instrument.code)
    messages.success(
        request,
        f"Checked in on {instrument.name} at {timezone.localtime(session.started_at):%H:%M}.",
    )
    return redirect("session-detail", pk=session.pk)


@login_required
@require_POST
def check_out(request: HttpRequest, pk: int) -> HttpResponse:
    session = get_object_or_404(queries.visible_to(request.user), pk=pk)
    back = request.POST.get("next", "")
    if not url_has_allowed_host_and_scheme(back, allowed_hosts={request.get_host()}):
        back = reverse("session-detail", args=[session.pk])
    form = CheckOutForm(request.POST)
    if not form.is_valid():
        for field, errors in form.errors.items():
            label = form.fields[field].label if field in form.fields else ""
            messages.error(request, f"{label}: {' '.join(errors)}".strip(": "))
        return redirect(back)
    try:
        session = services.check_out(
            session=session,
            by=request.user,
            beam_on_hours=form.cleaned_data["beam_on_hours"],
            vent_cycles=form.cleaned_data["vent_cycles"] or 0,
        )
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        messages.error(request, error.message)
        return redirect(back)
    minutes = round(session.hours * 60)
    messages.success(
        request,
        f"Checked out of {session.instrument.name} after {minutes // 60} h {minutes % 60:02d} min.",
    )
    return redirect(back)
