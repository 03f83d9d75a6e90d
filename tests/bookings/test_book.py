"""Booking rules: each refusal, with its message, and that a refused booking writes nothing."""

from __future__ import annotations

import datetime as dt
import zoneinfo

import pytest
import time_machine

from facility.bookings import services
from facility.bookings.models import Booking, BookingState, Purpose
from facility.errors import Closed, Conflict, Invalid, NotAllowed, NotTrained
from facility.instruments.models import TrainingLevel, TrainingRecord
from tests import factories as f

TZ = zoneinfo.ZoneInfo("Europe/Vienna")


def at(day: int, hour: int, minute: int = 0, month: int = 3) -> dt.datetime:
    """A moment in March 2027 in the facility's zone (Monday 1 March 2027)."""
    return dt.datetime(2027, month, day, hour, minute, tzinfo=TZ)


@pytest.fixture(autouse=True)
def _clock(settings):
    settings.TIME_ZONE = "Europe/Vienna"
    with time_machine.travel(at(1, 7), tick=False):
        yield


def _book(fac, user=None, start=None, end=None, **kw):
    user = user or fac.researcher_a
    return services.book(
        user=user,
        instrument=kw.pop("instrument", fac.sem),
        account=kw.pop("account", fac.account_a),
        starts_at=start or at(2, 9),
        ends_at=end or at(2, 11),
        **kw,
    )


def test_a_valid_booking_is_confirmed(facility):
    booking = _book(facility)
    assert booking.state == BookingState.CONFIRMED
    assert Booking.objects.count() == 1


@pytest.mark.parametrize(
    ("start", "end", "error", "fragment"),
    [
        (at(2, 11), at(2, 9), Invalid, "must end after it starts"),
        (at(2, 9), at(2, 9), Invalid, "must end after it starts"),
        (dt.datetime(2027, 2, 26, 9, tzinfo=TZ), at(2, 10), Invalid, "in the past"),
        (at(2, 8), at(2, 17), Invalid, "at most 8 h 00 min"),
    ],
)
def test_time_rules_refuse_and_write_nothing(facility, start, end, error, fragment):
    with pytest.raises(error, match=fragment):
        _book(facility, start=start, end=end)
    assert Booking.objects.count() == 0


def test_naive_times_are_refused(facility):
    with pytest.raises(Invalid, match="time zone"):
        _book(facility, start=dt.datetime(2027, 3, 2, 9), end=dt.datetime(2027, 3, 2, 10))


def test_untrained_user_is_refused(facility):
    stranger = f.UserFactory(username="noah.untrained")
    f.MembershipFactory(user=stranger, group=facility.group_a)
    with pytest.raises(NotTrained, match="no training record"):
        _book(facility, user=stranger)
    assert Booking.objects.count() == 0


def test_expired_training_is_refused(facility):
    TrainingRecord.objects.filter(user=facility.researcher_a).update(expires_on=dt.date(2027, 2, 1))
    with pytest.raises(NotTrained, match="not valid on 2027-03-02"):
        _book(facility)


def test_supervised_user_may_book_training_but_not_own_use(facility):
    TrainingRecord.objects.filter(user=facility.researcher_a).update(level=TrainingLevel.SUPERVISED)
    with pytest.raises(NotTrained, match="'Independent' training level"):
        _book(facility)
    assert _book(facility, purpose=Purpose.TRAINING).purpose == Purpose.TRAINING


def test_out_of_hours_needs_the_out_of_hours_level(facility):
    # 17:00–20:00 runs past the 18:00 end of normal hours.
    with pytest.raises(NotTrained, match="Out of hours"):
        _book(facility, start=at(2, 17), end=at(2, 20))
    TrainingRecord.objects.filter(user=facility.researcher_a).update(
        level=TrainingLevel.OUT_OF_HOURS
    )
    assert _book(facility, start=at(2, 17), end=at(2, 20)).pk


def test_weekend_is_out_of_hours(facility):
    # Saturday 6 March 2027.
    with pytest.raises(NotTrained, match="Out of hours"):
        _book(facility, start=at(6, 10), end=at(6, 12))


def test_instrument_without_out_of_hours_refuses_and_staff_may_override(facility):
    facility.sem.allows_out_of_hours = False
    facility.sem.save()
    with pytest.raises(Invalid, match="can be booked only from 08:00 to 18:00"):
        _book(facility, start=at(2, 19), end=at(2, 21))
    with pytest.raises(NotAllowed, match="Only facility staff"):
        _book(facility, start=at(2, 19), end=at(2, 21), override_hours=True)
    booking = _book(
        facility, start=at(2, 19), end=at(2, 21), override_hours=True, by=facility.manager
    )
    assert booking.created_by == facility.manager


def test_account_of_another_group_is_refused(facility):
    with pytest.raises(NotAllowed, match=r"does not belong to any group of ada\.researcher"):
        _book(facility, account=facility.account_b)
    assert Booking.objects.count() == 0


def test_account_outside_its_validity_is_refused(facility):
    facility.account_a.valid_to = dt.date(2027, 3, 1)
    facility.account_a.save()
    with pytest.raises(Invalid, match="does not cover 2027-03-02"):
        _book(facility)


def test_inactive_account_is_refused(facility):
    facility.account_a.is_active = False
    facility.account_a.save()
    with pytest.raises(Invalid, match="inactive"):
        _book(facility)


def test_out_of_service_instrument_is_refused(facility):
    facility.sem.out_of_service = True
    facility.sem.save()
    with pytest.raises(Closed, match="out of service"):
        _book(facility)


def test_service_time_is_for_staff_only(facility):
    with pytest.raises(NotAllowed, match="service time"):
        _book(facility, purpose=Purpose.SERVICE)


def test_only_staff_book_for_someone_else(facility):
    with pytest.raises(NotAllowed, match="for someone else"):
        _book(facility, by=facility.researcher_b)
    assert _book(facility, by=facility.manager).user == facility.researcher_a


def test_overlap_is_refused_without_naming_the_holder(facility):
    _book(facility)
    with pytest.raises(Conflict) as caught:
        _book(
            facility,
            user=facility.researcher_b,
            account=facility.account_b,
            start=at(2, 10),
            end=at(2, 12),
        )
    assert "already booked" in caught.value.message
    assert "ada" not in caught.value.message
    assert Booking.objects.count() == 1


def test_back_to_back_bookings_do_not_overlap(facility):
    # Half-open ranges: one may end exactly when the next starts.
    _book(facility, start=at(2, 9), end=at(2, 11))
    _book(
        facility,
        user=facility.researcher_b,
        account=facility.account_b,
        start=at(2, 11),
        end=at(2, 12),
    )
    assert Booking.objects.count() == 2


def test_cancelled_time_can_be_booked_again(facility):
    booking = _book(facility)
    services.cancel(booking=booking, by=facility.researcher_a)
    assert _book(facility, user=facility.researcher_b, account=facility.account_b).pk


def test_idempotency_key_returns_the_first_booking(facility):
    first = _book(facility, idempotency_key="acq-1")
    again = _book(facility, idempotency_key="acq-1")
    assert first.pk == again.pk
    with pytest.raises(Conflict, match="idempotency key"):
        _book(facility, idempotency_key="acq-1", start=at(3, 9), end=at(3, 10))
    assert Booking.objects.count() == 1


def test_dst_day_hours_follow_local_time(facility):
    # Sunday 28 March 2027 the clocks in Vienna go forward. Monday 29 March 09:00 local is 07:00 UTC.
    booking = _book(
        facility,
        start=dt.datetime(2027, 3, 29, 9, tzinfo=TZ),
        end=dt.datetime(2027, 3, 29, 18, tzinfo=TZ) - dt.timedelta(hours=1),
    )
    assert booking.starts_at.astimezone(dt.UTC).hour == 7  # CEST = UTC+2 (IANA tz database)
