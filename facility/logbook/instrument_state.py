"""An instrument's state now: free, booked, in session, or out of service.

Read from the bookings and the logbook with two EXISTS subqueries, so a list of instruments costs
one query however many there are. It lives in the logbook, the first app that sees both bookings
and sessions; the API's instrument list and pages read it from here.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Exists, OuterRef, QuerySet
from django.utils import timezone

from facility.bookings.models import LIVE_STATES, Booking
from facility.instruments.models import Instrument
from facility.logbook.models import InstrumentSession
from facility.people.queries import is_staff

FREE = "free"
BOOKED = "booked"
IN_SESSION = "in_session"
OUT_OF_SERVICE = "out_of_service"
STATES = (FREE, BOOKED, IN_SESSION, OUT_OF_SERVICE)


def instruments_visible_to(
    user: AbstractBaseUser, *, now: dt.datetime | None = None
) -> QuerySet[Instrument]:
    """Instruments with `in_session` and `booked_now` annotated. Staff also see retired ones.

    The facility's instruments are not secret: every signed-in person sees the catalogue and
    whether an instrument is taken now, never by whom.
    """
    now = now or timezone.now()
    qs = Instrument.objects.all() if is_staff(user) else Instrument.objects.filter(is_active=True)
    if not user.is_authenticated:
        qs = qs.none()
    return qs.annotate(
        in_session=Exists(
            InstrumentSession.objects.filter(instrument=OuterRef("pk"), ended_at__isnull=True)
        ),
        booked_now=Exists(
            Booking.objects.filter(
                instrument=OuterRef("pk"),
                state__in=LIVE_STATES,
                starts_at__lte=now,
                ends_at__gt=now,
            )
        ),
    )


def state_of(instrument: Instrument) -> str:
    """The state of an instrument from `instruments_visible_to` (out of service wins)."""
    if instrument.out_of_service or not instrument.is_active:
        return OUT_OF_SERVICE
    if getattr(instrument, "in_session", False):
        return IN_SESSION
    if getattr(instrument, "booked_now", False):
        return BOOKED
    return FREE
