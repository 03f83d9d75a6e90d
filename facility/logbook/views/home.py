"""The overview page, different by role.

It reads across bookings and the logbook, so it lives with the logbook (the rightmost app it reads);
when billing and upkeep grow pages, their summaries join the staff overview here or move it to a
page module above all apps.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.decorators import login_required
from django.db.models import Count, DurationField, F, Sum
from django.http import HttpRequest, HttpResponse
from django.shortcuts import render
from django.utils import timezone
from django.views.decorators.http import require_GET

from facility.bookings.models import LIVE_STATES, Booking, BookingState
from facility.instruments.models import Instrument
from facility.logbook.models import Flag, InstrumentSession, Severity
from facility.people.models import Notification
from facility.people.queries import is_staff

RECENT = dt.timedelta(days=30)
ALERT_WINDOW = dt.timedelta(days=14)
SEVERITY_ORDER = {Severity.PROBLEM: 0, Severity.WARNING: 1, Severity.INFO: 2}


def local_day_bounds(now: dt.datetime) -> tuple[dt.datetime, dt.datetime]:
    local = timezone.localtime(now)
    start = local.replace(hour=0, minute=0, second=0, microsecond=0)
    return start, start + dt.timedelta(days=1)


def month_start(now: dt.datetime) -> dt.datetime:
    local = timezone.localtime(now)
    return local.replace(day=1, hour=0, minute=0, second=0, microsecond=0)


@login_required
@require_GET
def home(request: HttpRequest) -> HttpResponse:
    now = timezone.now()
    if is_staff(request.user):
        return render(request, "logbook/home_staff.html", _staff(request, now))
    return render(request, "logbook/home_researcher.html", _researcher(request, now))


def _notifications(user) -> list[Notification]:
    return list(Notification.objects.filter(user=user, read_at__isnull=True)[:5])


def _researcher(request: HttpRequest, now: dt.datetime) -> dict:
    user = request.user
    next_bookings = list(
        Booking.objects.filter(
            user=user,
            state__in=(BookingState.REQUESTED, BookingState.CONFIRMED),
            ends_at__gt=now,
        )
        .select_related("instrument")
        .order_by("starts_at")[:5]
    )
    open_session = (
        InstrumentSession.objects.filter(operator=user, ended_at__isnull=True)
        .select_related("instrument")
        .first()
    )
    recent_flags = sorted(
        Flag.objects.filter(
            session__operator=user,
            dismissed_at__isnull=True,
            session__started_at__gte=now - RECENT,
        )
        .select_related("session__instrument")
        .order_by("-computed_at")[:6],
        key=lambda flag: SEVERITY_ORDER.get(flag.severity, 3),
    )
    first = month_start(now)
    month = InstrumentSession.objects.filter(
        operator=user, started_at__gte=first, ended_at__isnull=False
    ).aggregate(
        used=Sum(F("ended_at") - F("started_at"), output_field=DurationField()),
        beam=Sum("beam_on_hours"),
        sessions=Count("id"),
    )
    return {
        "next_bookings": next_bookings,
        "open_session": open_session,
        "recent_flags": recent_flags,
        "month": month,
        "month_start": first,
        "notifications": _notifications(user),
        "nav": "home",
    }


def _staff(request: HttpRequest, now: dt.datetime) -> dict:
    day_start, day_end = local_day_bounds(now)
    instruments = list(Instrument.objects.filter(is_active=True))
    todays = (
        Booking.objects.filter(state__in=LIVE_STATES, starts_at__lt=day_end, ends_at__gt=day_start)
        .select_related("user")
        .order_by("starts_at")
    )
    open_sessions = {
        s.instrument_id: s
        for s in InstrumentSession.objects.filter(ended_at__isnull=True).select_related("operator")
    }
    by_instrument: dict[int, list[Booking]] = {i.pk: [] for i in instruments}
    for booking in todays:
        by_instrument.setdefault(booking.instrument_id, []).append(booking)
    today = [
        {
            "instrument": i,
            "bookings": by_instrument.get(i.pk, []),
            "open_session": open_sessions.get(i.pk),
        }
        for i in instruments
    ]
    pending = list(
        Booking.objects.filter(state=BookingState.REQUESTED, ends_at__gt=now)
        .select_related("instrument", "user")
        .order_by("starts_at")[:20]
    )
    open_flags = list(
        Flag.objects.filter(
            dismissed_at__isnull=True,
            severity=Severity.PROBLEM,
            computed_at__gte=now - ALERT_WINDOW,
        )
        .select_related("session__instrument", "session__operator")
        .order_by("-computed_at")[:20]
    )
    faults = list(
        InstrumentSession.objects.filter(started_at__gte=now - ALERT_WINDOW)
        .exclude(fault_report="")
        .select_related("instrument", "operator")
        .order_by("-started_at")[:10]
    )
    return {
        "today": today,
        "pending": pending,
        "open_flags": open_flags,
        "faults": faults,
        "notifications": _notifications(request.user),
        "now": now,
        "nav": "home",
    }
