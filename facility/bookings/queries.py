"""Reads about bookings: access scoping, overlaps, calendars."""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Q, QuerySet

from facility.bookings.models import LIVE_STATES, Booking
from facility.instruments.models import Instrument
from facility.people.queries import group_ids_of, is_staff


def visible_to(user: AbstractBaseUser) -> QuerySet[Booking]:
    """Staff see every booking; others their own and those on their groups' accounts.

    An external client belongs only to their own organisation's group, so this also keeps them
    to their own bookings.
    """
    qs = Booking.objects.select_related("instrument", "user", "account", "account__group")
    if is_staff(user):
        return qs
    if not user.is_authenticated:
        return qs.none()
    return qs.filter(Q(user=user) | Q(account__group_id__in=group_ids_of(user))).distinct()


def overlapping(
    instrument: Instrument,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    *,
    exclude_id: int | None = None,
) -> QuerySet[Booking]:
    """Live bookings of the instrument that share any instant with [starts_at, ends_at)."""
    qs = Booking.objects.filter(
        instrument=instrument,
        state__in=LIVE_STATES,
        starts_at__lt=ends_at,
        ends_at__gt=starts_at,
    )
    if exclude_id is not None:
        qs = qs.exclude(id=exclude_id)
    return qs


def in_window(instrument: Instrument, starts: dt.datetime, ends: dt.datetime) -> QuerySet[Booking]:
    """Live bookings of an instrument that touch a window, for calendars."""
    return overlapping(instrument, starts, ends).select_related("user", "account")
