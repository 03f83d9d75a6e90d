"""Cancelling, moving, confirming and no-shows."""

from __future__ import annotations

import datetime as dt

import pytest
import time_machine

from facility.bookings import services
from facility.bookings.models import BookingState
from facility.errors import Conflict, Invalid, NotAllowed
from tests.bookings.test_book import TZ, _book, at


@pytest.fixture(autouse=True)
def _clock(settings):
    settings.TIME_ZONE = "Europe/Vienna"
    with time_machine.travel(at(1, 7), tick=False) as traveller:
        yield traveller


def test_cancel_before_the_deadline_is_plain(facility):
    booking = _book(facility, start=at(3, 9), end=at(3, 10))  # 50 h ahead, deadline 24 h
    booking = services.cancel(booking=booking, by=facility.researcher_a)
    assert booking.state == BookingState.CANCELLED
    assert booking.cancelled_at is not None


def test_cancel_after_the_deadline_is_late(facility):
    booking = _book(facility, start=at(1, 15), end=at(1, 16))  # 8 h ahead
    assert services.late_cancellation_applies(booking)
    booking = services.cancel(booking=booking, by=facility.researcher_a)
    assert booking.state == BookingState.LATE_CANCELLED


def test_other_researcher_cannot_cancel(facility):
    booking = _book(facility)
    with pytest.raises(NotAllowed, match="cancel"):
        services.cancel(booking=booking, by=facility.researcher_b)
    booking.refresh_from_db()
    assert booking.state == BookingState.CONFIRMED


def test_group_leader_and_staff_can_cancel(facility):
    one = _book(facility)
    two = _book(facility, start=at(3, 9), end=at(3, 10))
    assert services.cancel(booking=one, by=facility.leader_a).state == BookingState.CANCELLED
    assert services.cancel(booking=two, by=facility.manager).state == BookingState.CANCELLED


def test_cancel_twice_is_refused(facility):
    booking = _book(facility)
    services.cancel(booking=booking, by=facility.researcher_a)
    with pytest.raises(Conflict, match="already cancelled"):
        services.cancel(booking=booking, by=facility.researcher_a)


def test_no_show_is_staff_only_and_only_after_start(facility, _clock):
    booking = _book(facility, start=at(1, 9), end=at(1, 11))
    with pytest.raises(NotAllowed):
        services.mark_no_show(booking=booking, by=facility.researcher_a)
    with pytest.raises(Invalid, match="not started"):
        services.mark_no_show(booking=booking, by=facility.manager)
    _clock.move_to(at(1, 9, 30))
    booking = services.mark_no_show(booking=booking, by=facility.manager)
    assert booking.state == BookingState.NO_SHOW


def test_move_keeps_the_rules(facility):
    booking = _book(facility)
    _book(
        facility,
        user=facility.researcher_b,
        account=facility.account_b,
        start=at(3, 9),
        end=at(3, 12),
    )
    with pytest.raises(Conflict, match="already booked"):
        services.move(
            booking=booking, by=facility.researcher_a, starts_at=at(3, 10), ends_at=at(3, 11)
        )
    moved = services.move(
        booking=booking, by=facility.researcher_a, starts_at=at(2, 12), ends_at=at(2, 14)
    )
    assert moved.starts_at == at(2, 12)
    # Moving onto its own old time (overlapping itself) is fine.
    services.move(booking=booking, by=facility.researcher_a, starts_at=at(2, 13), ends_at=at(2, 15))


def test_confirm_a_request(facility):
    booking = _book(facility)
    booking.state = BookingState.REQUESTED
    booking.save()
    with pytest.raises(NotAllowed):
        services.confirm(booking=booking, by=facility.researcher_a)
    assert services.confirm(booking=booking, by=facility.manager).state == BookingState.CONFIRMED


def test_move_after_start_is_refused(facility, _clock):
    booking = _book(facility, start=at(1, 9), end=at(1, 11))
    _clock.move_to(at(1, 10))
    with pytest.raises(Conflict, match="has started"):
        services.move(
            booking=booking,
            by=facility.researcher_a,
            starts_at=at(2, 9),
            ends_at=dt.datetime(2027, 3, 2, 10, tzinfo=TZ),
        )
