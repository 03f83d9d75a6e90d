"""Instrument pages: the list with each instrument's state right now, and one instrument's week.

They read bookings and the logbook (who is in the chamber now), so they live with the logbook.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.decorators import login_required
from django.db.models import Count, Q
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_GET

from facility.bookings.models import LIVE_STATES, Booking
from facility.bookings.queries import in_window
from facility.bookings.weekgrid import build_week, monday_of, week_bounds
from facility.instruments.models import Instrument, TrainingRecord
from facility.logbook import queries
from facility.logbook.models import InstrumentSession
from facility.logbook.views.home import local_day_bounds
from facility.people.queries import is_staff


@login_required
@require_GET
def instrument_list(request: HttpRequest) -> HttpResponse:
    now = timezone.now()
    _, day_end = local_day_bounds(now)
    instruments = list(Instrument.objects.filter(is_active=True))
    open_by = {
        s.instrument_id: s
        for s in InstrumentSession.objects.filter(ended_at__isnull=True).select_related("operator")
    }
    upcoming: dict[int, list[Booking]] = {}
    for booking in Booking.objects.filter(
        state__in=LIVE_STATES, ends_at__gt=now, starts_at__lt=day_end
    ).order_by("starts_at"):
        upcoming.setdefault(booking.instrument_id, []).append(booking)
    mine = {r.instrument_id: r for r in TrainingRecord.objects.filter(user=request.user)}
    rows = []
    for instrument in instruments:
        later = upcoming.get(instrument.pk, [])
        current = next((b for b in later if b.starts_at <= now), None)
        following = next((b for b in later if b.starts_at > now), None)
        session = open_by.get(instrument.pk)
        if instrument.out_of_service:
            state, tone = "Out of service", "off"
        elif session is not None:
            state, tone = f"In use since {timezone.localtime(session.started_at):%H:%M}", "busy"
        elif current is not None:
            state, tone = "Booked now, nobody checked in yet", "busy"
        else:
            state, tone = "Free now", "free"
        rows.append(
            {
                "instrument": instrument,
                "state": state,
                "tone": tone,
                "session": session,
                "session_is_mine": session is not None and session.operator_id == request.user.pk,
                "next": following,
                "training": mine.get(instrument.pk),
            }
        )
    return render(
        request,
        "logbook/instrument_list.html",
        {"rows": rows, "staff": is_staff(request.user), "nav": "instruments"},
    )


def _requested_monday(request: HttpRequest, today: dt.date) -> dt.date:
    text = request.GET.get("week", "")
    try:
        return monday_of(dt.date.fromisoformat(text))
    except ValueError:
        return monday_of(today)


@login_required
@require_GET
def instrument_detail(request: HttpRequest, code: str) -> HttpResponse:
    instrument = get_object_or_404(Instrument, code=code)
    now = timezone.now()
    tz = timezone.get_current_timezone()
    staff = is_staff(request.user)
    monday = _requested_monday(request, timezone.localdate(now))
    full_day = request.GET.get("hours") == "all"
    start, end = week_bounds(monday, tz)
    week = build_week(
        instrument=instrument,
        monday=monday,
        bookings=list(in_window(instrument, start, end)),
        viewer=request.user,
        viewer_is_staff=staff,
        now=now,
        tz=tz,
        full_day=full_day,
    )
    trained = list(
        TrainingRecord.objects.filter(instrument=instrument)
        .select_related("user")
        .order_by("-level", "user__last_name", "user__username")
    )
    today = timezone.localdate(now)
    recent = list(
        queries.visible_to(request.user)
        .filter(instrument=instrument)
        .annotate(open_flags=Count("flags", filter=Q(flags__dismissed_at__isnull=True)))
        .order_by("-started_at")[:10]
    )
    return render(
        request,
        "logbook/instrument_detail.html",
        {
            "instrument": instrument,
            "week": week,
            "book_url": reverse("booking-new", args=[instrument.code]),
            "full_day": full_day,
            "trained": trained,
            "my_record": next((r for r in trained if r.user_id == request.user.pk), None),
            "today": today,
            "recent": recent,
            "open_session": queries.open_session(instrument.pk),
            "staff": staff,
            "nav": "instruments",
        },
    )
