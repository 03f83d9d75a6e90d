"""Worked examples, priced by hand in the comments and then through the drafting service.

Conventions of the trade these examples follow (DOMAIN.md "Facility operations"; common
practice, no single source): hourly rates per instrument and user category, time rounded up to
an increment, a minimum charge, staff time on assisted sessions, late cancellations and no-shows
charged as a share of the booked time. Rounding is half up to cents (Python `decimal` docs,
ROUND_HALF_UP). Time-zone facts come from the IANA tz database; Easter from dateutil.easter.

The SEM's normal hours are Mon–Fri 08:00–18:00 in Vienna. Default tariff: 80.00 EUR/h,
15-minute increment, no minimum, out-of-hours factor 1.5 where a test sets it.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
from dateutil.easter import easter

from facility.billing import services
from facility.billing.models import ChargeBasis, ChargeKind
from facility.bookings.models import BookingState, Purpose
from tests.billing.helpers import MARCH, add_tariff, amounts, at, draft, log_booking, log_session

pytestmark = pytest.mark.django_db


def test_time_is_rounded_up_to_the_increment(facility):
    add_tariff(facility)
    # Tue 2 Mar 09:00–10:07 = 67 min → next multiple of 15 = 75 min = 1.25 h × 80.00 = 100.00.
    log_session(facility, at(2, 9), at(2, 10, 7))
    statement = draft(facility)
    line = statement.lines.get()
    assert line.billed_minutes == 75
    assert line.amount == Decimal("100.00")


def test_an_exact_multiple_is_not_rounded_further(facility):
    add_tariff(facility, increment_minutes=30)
    # 09:00–10:30 = 90 min, already 3 × 30 → 1.5 h × 80.00 = 120.00.
    log_session(facility, at(2, 9), at(2, 10, 30))
    assert amounts(draft(facility)) == [Decimal("120.00")]


def test_minimum_charge(facility):
    add_tariff(facility, minimum_charge="30.00")
    # 09:00–09:10 = 10 min → 15 min = 0.25 h × 80.00 = 20.00, below the 30.00 minimum → 30.00.
    log_session(facility, at(2, 9), at(2, 9, 10))
    line = draft(facility).lines.get()
    assert line.amount == Decimal("30.00")
    assert "minimum charge 30.00 applies" in line.description


def test_out_of_hours_split_evening(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # Tue 2 Mar 17:00–19:30: 17–18 normal = 1 h × 80.00 = 80.00;
    # 18:00–19:30 out of hours = 1.5 h × 80.00 × 1.5 = 180.00. Line = 260.00.
    log_session(facility, at(2, 17), at(2, 19, 30))
    line = draft(facility).lines.get()
    assert (line.billed_minutes, line.out_of_hours_minutes) == (150, 90)
    assert line.amount == Decimal("260.00")


def test_rounded_up_time_counts_where_the_session_ends(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # 17:00–19:05 = 125 min → 135 min. Ends out of hours, so the extra 10 min are out of hours:
    # 60 min normal = 80.00, 75 min × 120.00/h = 150.00 → 230.00.
    log_session(facility, at(2, 17), at(2, 19, 5))
    line = draft(facility).lines.get()
    assert (line.billed_minutes, line.out_of_hours_minutes) == (135, 75)
    assert line.amount == Decimal("230.00")


def test_morning_start_before_opening_is_quantized_once(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # 07:50–09:05 = 75 min (a multiple of 15). 10 min before 08:00 at 120.00/h = 20.00;
    # 65 min at 80.00/h = 86.666…; exact sum 106.666… → 106.67 (one rounding for the line).
    log_session(facility, at(2, 7, 50), at(2, 9, 5))
    line = draft(facility).lines.get()
    assert line.out_of_hours_minutes == 10
    assert line.amount == Decimal("106.67")


def test_weekend_is_out_of_hours(facility):
    add_tariff(facility, out_of_hours_factor="2")
    # Sat 6 Mar 10:00–12:00: all out of hours, 2 h × 80.00 × 2 = 320.00.
    log_session(facility, at(6, 10), at(6, 12))
    assert amounts(draft(facility)) == [Decimal("320.00")]


def test_public_holiday_is_out_of_hours(facility):
    # Easter Monday 2027 (Easter Sunday is 28 March 2027 — dateutil.easter, Western computus).
    easter_monday = easter(2027) + dt.timedelta(days=1)
    assert easter_monday == dt.date(2027, 3, 29)
    add_tariff(facility, out_of_hours_factor="1.5")
    log_session(facility, at(29, 10), at(29, 12))
    # Without the holiday recorded it is an ordinary Monday: 2 h × 80.00 = 160.00.
    assert amounts(draft(facility)) == [Decimal("160.00")]
    services.add_holiday(day=easter_monday, name="Easter Monday", by=facility.manager)
    # As a holiday: 2 h × 80.00 × 1.5 = 240.00.
    assert amounts(draft(facility)) == [Decimal("240.00")]


def test_assisted_session_adds_staff_time(facility):
    add_tariff(facility, purpose=Purpose.ASSISTED, staff_hourly_rate="60.00")
    # 10:00–12:00 = 2 h × 80.00 = 160.00; staff 50 min → 60 min × 60.00/h = 60.00. Line 220.00.
    log_session(facility, at(3, 10), at(3, 12), purpose=Purpose.ASSISTED, staff_minutes=50)
    line = draft(facility).lines.get()
    assert line.staff_minutes == 60
    assert line.amount == Decimal("220.00")


def test_late_cancellation_is_a_share_of_the_booked_time(facility):
    add_tariff(facility, late_cancellation_share="0.5")
    # Booked Wed 3 Mar 09:00–12:00 = 3 h × 80.00 = 240.00; 50 % → 120.00.
    booking = log_booking(facility, at(3, 9), at(3, 12), state=BookingState.LATE_CANCELLED)
    line = draft(facility).lines.get()
    assert (line.kind, line.booking_id) == (ChargeKind.LATE_CANCELLATION, booking.pk)
    assert line.amount == Decimal("120.00")


def test_no_show_is_a_share_of_the_booked_time(facility):
    add_tariff(facility, no_show_share="1", out_of_hours_factor="1.5")
    # Booked Thu 4 Mar 17:00–19:00 and nobody came: 1 h × 80.00 + 1 h × 120.00 = 200.00 × 100 %.
    log_booking(facility, at(4, 17), at(4, 19), state=BookingState.NO_SHOW)
    line = draft(facility).lines.get()
    assert line.kind == ChargeKind.NO_SHOW
    assert line.amount == Decimal("200.00")


def test_a_timely_cancellation_and_a_zero_share_cost_nothing(facility):
    add_tariff(facility)  # late-cancellation share 0
    log_booking(facility, at(3, 9), at(3, 12), state=BookingState.CANCELLED)
    log_booking(facility, at(4, 9), at(4, 12), state=BookingState.LATE_CANCELLED)
    assert draft(facility) is None


def test_dst_spring_forward_night_counts_real_hours(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # Sun 28 Mar 2027 01:00–04:00 in Vienna: clocks jump 02:00 → 03:00 (EU rule: last Sunday of
    # March, IANA tz database), so only 2 h pass. Sunday is out of hours: 2 × 120.00 = 240.00
    # (a wall-clock count would say 3 h = 360.00).
    log_session(facility, at(28, 1), at(28, 4))
    line = draft(facility).lines.get()
    assert line.billed_minutes == 120
    assert line.amount == Decimal("240.00")


def test_dst_autumn_night_counts_real_hours(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # Sun 31 Oct 2027 01:00–04:00: clocks go back 03:00 → 02:00, so 4 h pass: 4 × 120.00 = 480.00.
    log_session(facility, at(31, 1, month=10), at(31, 4, month=10))
    line = draft(facility, month=dt.date(2027, 10, 1)).lines.get()
    assert line.billed_minutes == 240
    assert line.amount == Decimal("480.00")


def test_normal_hours_follow_local_time_after_the_change(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # Tue 30 Mar 17:00–19:00 CEST (15:00–17:00 UTC): 1 h normal 80.00 + 1 h out 120.00 = 200.00.
    # Reading the window in UTC would make all of it normal time (160.00).
    log_session(facility, at(30, 17), at(30, 19))
    assert amounts(draft(facility)) == [Decimal("200.00")]


def test_tariff_change_mid_month(facility):
    add_tariff(facility, out_of_hours_factor="1.5")  # 80.00 from 1 January, open-ended
    new = add_tariff(facility, hourly_rate="90.00", valid_from=dt.date(2027, 3, 16))
    old = new.instrument.tariffs.get(hourly_rate=Decimal("80.00"))
    assert old.valid_to == dt.date(2027, 3, 15)  # the old version closes the day before
    # Mon 15 Mar 10–12 at 80.00 = 160.00; Tue 16 Mar 10–12 at 90.00 = 180.00;
    # Mon 15 Mar 23:00 – Tue 01:00 started under the old tariff: 2 h × 80.00 × 1.5 = 240.00.
    log_session(facility, at(15, 10), at(15, 12))
    log_session(facility, at(16, 10), at(16, 12))
    log_session(facility, at(15, 23), at(16, 1))
    statement = draft(facility)
    assert amounts(statement) == [Decimal("160.00"), Decimal("240.00"), Decimal("180.00")]
    assert statement.total == Decimal("580.00")


def test_session_over_midnight_at_month_end_belongs_to_its_start(facility):
    add_tariff(facility, out_of_hours_factor="1.5")
    # Wed 31 Mar 22:00 – Thu 1 Apr 02:00: 4 h out of hours × 120.00 = 480.00, on March's statement.
    log_session(facility, at(31, 22), at(1, 2, month=4))
    assert amounts(draft(facility)) == [Decimal("480.00")]
    assert draft(facility, month=dt.date(2027, 4, 1)) is None


def test_half_up_rounding_of_a_tie(facility):
    add_tariff(facility, hourly_rate="10.10")
    # 15 min at 10.10/h = 2.525 exactly → half up 2.53 (half-even "banker's" rounding gives 2.52).
    log_session(facility, at(2, 9), at(2, 9, 15))
    assert amounts(draft(facility)) == [Decimal("2.53")]


@pytest.mark.parametrize(
    ("basis", "expected"),
    [
        # Booked 09:00–11:00; used 09:10–10:20 = 70 min.
        (ChargeBasis.USED, Decimal("100.00")),  # 70 → 75 min × 80.00/h = 100.00
        (ChargeBasis.BOOKED, Decimal("160.00")),  # 120 min = 160.00
        (ChargeBasis.GREATER, Decimal("160.00")),  # max(120, 70) = 120 min = 160.00
    ],
)
def test_charge_basis(facility, basis, expected):
    add_tariff(facility, charge_basis=basis)
    booking = log_booking(facility, at(2, 9), at(2, 11))
    log_session(facility, at(2, 9, 10), at(2, 10, 20), booking=booking)
    line = draft(facility).lines.get()
    assert line.amount == expected
    assert line.booking_id == booking.pk  # the booking is taken with its session


def test_greater_basis_when_the_session_overran(facility):
    add_tariff(facility, charge_basis=ChargeBasis.GREATER)
    # Booked 09:00–11:00 (120 min), used 09:00–11:40 (160 min) → 165 min × 80.00/h = 220.00.
    booking = log_booking(facility, at(2, 9), at(2, 11))
    log_session(facility, at(2, 9), at(2, 11, 40), booking=booking)
    assert amounts(draft(facility)) == [Decimal("220.00")]


def test_rate_category_comes_from_the_user(facility):
    add_tariff(facility)
    add_tariff(facility, rate_category="commercial", hourly_rate="250.00")
    # The commercial client's 2 h at 250.00 = 500.00 on their purchase order.
    log_session(
        facility, at(2, 9), at(2, 11), user=facility.client, account=facility.client_account
    )
    assert amounts(draft(facility, account=facility.client_account)) == [Decimal("500.00")]


def test_a_month_statement_adds_up(facility):
    add_tariff(facility, out_of_hours_factor="1.5", late_cancellation_share="0.5")
    log_session(facility, at(2, 9), at(2, 10, 7))  # 100.00 (first example)
    log_session(facility, at(2, 17), at(2, 19, 30))  # 260.00
    log_booking(facility, at(3, 9), at(3, 12), state=BookingState.LATE_CANCELLED)  # 120.00
    statement = draft(facility)
    # 100.00 + 260.00 + 120.00 = 480.00, in time order.
    assert amounts(statement) == [Decimal("100.00"), Decimal("260.00"), Decimal("120.00")]
    assert statement.total == Decimal("480.00")
    assert statement.month == MARCH and statement.currency == "EUR"
