"""iCalendar feeds of bookings (RFC 5545), behind a private, signed URL token.

The token is an HMAC (Django's `salted_hmac`, keyed by SECRET_KEY) over the person's id and their
password hash, so nothing is stored, a forged or edited token fails, and changing one's password
makes every old feed URL stop working. Events never name another person unless the feed's owner is
staff — the same rule as the instrument page's calendar.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable

from django.contrib.auth import get_user_model
from django.contrib.auth.models import AbstractBaseUser
from django.utils import timezone
from django.utils.crypto import constant_time_compare, salted_hmac
from icalendar import Calendar, Event

from facility.bookings.models import Booking, BookingState
from facility.instruments.models import Instrument

_SALT = "beamledger.bookings.feeds"
_DIGEST_CHARS = 40
# Feeds carry this much of the past and the future (calendar apps poll them every few hours).
PAST = dt.timedelta(days=60)
FUTURE = dt.timedelta(days=366)


def feed_token(user: AbstractBaseUser) -> str:
    digest = salted_hmac(_SALT, f"{user.pk}:{user.password}", algorithm="sha256").hexdigest()[
        :_DIGEST_CHARS
    ]
    return f"{user.pk}-{digest}"


def user_for_token(token: str) -> AbstractBaseUser | None:
    """The active person a token belongs to, or None for a wrong, stale or malformed token."""
    head, _, digest = token.partition("-")
    if not head.isdigit() or len(digest) != _DIGEST_CHARS:
        return None
    user = get_user_model().objects.filter(pk=int(head), is_active=True).first()
    if user is None or not constant_time_compare(feed_token(user), token):
        return None
    return user


def window(now: dt.datetime | None = None) -> tuple[dt.datetime, dt.datetime]:
    now = now or timezone.now()
    return now - PAST, now + FUTURE


def _calendar(name: str) -> Calendar:
    cal = Calendar()
    cal.add("prodid", "-//Beamledger//Bookings//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    cal.add("method", "PUBLISH")
    cal.add("x-wr-calname", name)
    return cal


def _event(booking: Booking, summary: str, *, host: str, description: str, url: str) -> Event:
    event = Event()
    event.add("uid", f"booking-{booking.pk}@{host}")
    event.add("dtstamp", booking.created_at or timezone.now())
    event.add("dtstart", booking.starts_at.astimezone(dt.UTC))
    event.add("dtend", booking.ends_at.astimezone(dt.UTC))
    event.add("summary", summary)
    if booking.instrument.location:
        event.add("location", booking.instrument.location)
    event.add("status", "TENTATIVE" if booking.state == BookingState.REQUESTED else "CONFIRMED")
    event.add("transp", "OPAQUE")
    if description:
        event.add("description", description)
    if url:
        event.add("url", url)
    return event


def personal_calendar(
    user: AbstractBaseUser, bookings: Iterable[Booking], *, host: str, url_for
) -> bytes:
    """A person's own bookings. `url_for(booking)` gives the booking page's absolute URL."""
    cal = _calendar(f"My microscope bookings ({user.get_username()})")
    for booking in bookings:
        state = " (requested)" if booking.state == BookingState.REQUESTED else ""
        description = (
            f"{booking.get_purpose_display()} on account {booking.account.code}. {booking.note}"
        ).strip()
        cal.add_component(
            _event(
                booking,
                f"{booking.instrument.name}{state}",
                host=host,
                description=description,
                url=url_for(booking),
            )
        )
    return cal.to_ical()


def instrument_calendar(
    instrument: Instrument,
    bookings: Iterable[Booking],
    *,
    viewer: AbstractBaseUser,
    viewer_is_staff: bool,
    host: str,
    url_for,
) -> bytes:
    """Everyone's bookings of one instrument, as the viewer may see them."""
    cal = _calendar(f"{instrument.name} bookings")
    for booking in bookings:
        state = " (requested)" if booking.state == BookingState.REQUESTED else ""
        mine = booking.user_id == viewer.pk
        if mine:
            who, url = "your booking", url_for(booking)
        elif viewer_is_staff:
            who = booking.user.get_full_name() or booking.user.get_username()
            url = url_for(booking)
        else:
            who, url = "booked", ""
        cal.add_component(
            _event(
                booking,
                f"{instrument.name}: {who}{state}",
                host=host,
                description=booking.get_purpose_display() if (mine or viewer_is_staff) else "",
                url=url,
            )
        )
    return cal.to_ical()
