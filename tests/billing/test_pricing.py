"""Pricing and the facility calendar as pure functions, with hypothesis property tests.

The oracle for the calendar split walks the interval minute by minute in local time — a slow,
obviously correct method independent of the window arithmetic in hours.py. Rounding checks use
Python's decimal module (ROUND_HALF_UP) as the reference.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo
from decimal import ROUND_HALF_UP, Decimal
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from facility.billing import pricing
from facility.billing.hours import FacilityCalendar
from facility.billing.months import month_bounds, next_month, parse_month, previous_month

TZ = zoneinfo.ZoneInfo("Europe/Vienna")
CAL = FacilityCalendar(
    tz=TZ,
    opens=dt.time(8),
    closes=dt.time(18),
    weekdays=frozenset({1, 2, 3, 4, 5}),
    holidays=frozenset({dt.date(2027, 3, 29)}),
)
# A fortnight around the spring change (Sun 28 March 2027) and Easter Monday.
BASE = dt.datetime(2027, 3, 22, tzinfo=TZ).astimezone(dt.UTC)


def local(day, hour, minute=0, month=3):
    return dt.datetime(2027, month, day, hour, minute, tzinfo=TZ)


def test_split_across_the_evening_boundary():
    split = CAL.split(local(2, 17), local(2, 19, 30))
    assert (split.normal, split.out_of_hours) == (dt.timedelta(hours=1), dt.timedelta(hours=1.5))
    assert split.ends_out_of_hours


def test_split_of_the_spring_forward_night():
    # 01:00–04:00 local on 28 March 2027 is 2 h of real time (IANA tz: 02:00 → 03:00 CEST).
    split = CAL.split(local(28, 1), local(28, 4))
    assert split.total == dt.timedelta(hours=2)
    assert split.normal == dt.timedelta(0)


def test_overnight_run_has_both_ends_in_normal_hours():
    # Tue 17:00 → Wed 09:00: 1 h normal, 14 h out, 1 h normal (ends in normal hours).
    split = CAL.split(local(2, 17), local(3, 9))
    assert split.normal == dt.timedelta(hours=2)
    assert split.out_of_hours == dt.timedelta(hours=14)
    assert not split.ends_out_of_hours


def test_naive_times_are_refused():
    with pytest.raises(ValueError, match="aware"):
        CAL.split(dt.datetime(2027, 3, 2, 9), dt.datetime(2027, 3, 2, 10))


def test_bookable_hours_of_march_2027():
    # 23 weekdays in March 2027, one of them Easter Monday (a holiday here): 22 × 10 h = 220 h.
    assert CAL.normal_hours(dt.date(2027, 3, 1), dt.date(2027, 3, 31)) == dt.timedelta(hours=220)


def test_months():
    assert parse_month("2027-03") == dt.date(2027, 3, 1)
    assert next_month(dt.date(2027, 12, 1)) == dt.date(2028, 1, 1)
    assert previous_month(dt.date(2027, 1, 1)) == dt.date(2026, 12, 1)
    start, end = month_bounds(dt.date(2027, 3, 1), TZ)
    # 1 March 00:00 CET = 28 Feb 23:00 UTC; 1 April 00:00 CEST = 31 March 22:00 UTC.
    assert start == dt.datetime(2027, 2, 28, 23, tzinfo=dt.UTC)
    assert end == dt.datetime(2027, 3, 31, 22, tzinfo=dt.UTC)
    for bad in ("2027-3", "2027-13", "March", "2027-00"):
        with pytest.raises(ValueError):
            parse_month(bad)


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (Fraction(2525, 1000), "2.53"),
        (Fraction(-2525, 1000), "-2.53"),  # half up is away from zero for credits too
        (Fraction(1, 3), "0.33"),
        (Fraction(2, 3), "0.67"),
        (Fraction(5, 1000), "0.01"),
        (Fraction(4999, 1000000), "0.00"),
    ],
)
def test_quantize_money_matches_decimal_half_up(value, expected):
    assert str(pricing.quantize_money(value)) == expected
    # Reference: Python's decimal with ROUND_HALF_UP on the same exact value.
    reference = (Decimal(value.numerator) / Decimal(value.denominator)).quantize(
        Decimal("0.01"), rounding=ROUND_HALF_UP
    )
    assert pricing.quantize_money(value) == reference


def test_terms_refuse_floats():
    with pytest.raises(TypeError, match="Decimal"):
        pricing.Terms(hourly_rate=80.0)  # type: ignore[arg-type]


def _oracle_minutes(start: dt.datetime, minutes: int) -> tuple[int, int]:
    """Count each whole minute of [start, start+minutes) as normal or out of hours, in local time."""
    normal = 0
    for k in range(minutes):
        moment = (start + dt.timedelta(minutes=k)).astimezone(TZ)
        day_ok = moment.isoweekday() <= 5 and moment.date() not in CAL.holidays
        if day_ok and dt.time(8) <= moment.time() < dt.time(18):
            normal += 1
    return normal, minutes - normal


money = st.decimals(min_value=0, max_value=500, places=2, allow_nan=False, allow_infinity=False)
factors = st.sampled_from([Decimal("1"), Decimal("1.25"), Decimal("1.5"), Decimal("2")])
increments = st.sampled_from([1, 5, 10, 15, 30, 60])


@settings(max_examples=150, deadline=None)
@given(
    offset=st.integers(min_value=0, max_value=14 * 24 * 60),
    length=st.integers(min_value=1, max_value=16 * 60),
)
def test_split_agrees_with_a_minute_by_minute_count(offset, length):
    start = BASE + dt.timedelta(minutes=offset)
    split = CAL.split(start, start + dt.timedelta(minutes=length))
    normal, out = _oracle_minutes(start, length)
    assert split.normal == dt.timedelta(minutes=normal)
    assert split.out_of_hours == dt.timedelta(minutes=out)


@settings(max_examples=200, deadline=None)
@given(
    rate=money,
    staff_rate=money,
    minimum=money,
    factor=factors,
    increment=increments,
    offset=st.integers(min_value=0, max_value=14 * 24 * 60),
    seconds=st.integers(min_value=1, max_value=12 * 3600),
    staff=st.integers(min_value=0, max_value=240),
)
def test_price_properties(rate, staff_rate, minimum, factor, increment, offset, seconds, staff):
    terms = pricing.Terms(rate, increment, minimum, factor, staff_rate)
    start = BASE + dt.timedelta(minutes=offset)
    end = start + dt.timedelta(seconds=seconds)
    price = pricing.price_use(terms, CAL, (start, end), staff_minutes=staff)
    # Every amount has exactly two places.
    assert price.amount.as_tuple().exponent == -2
    # Billed time is the length rounded up to the increment, never less than used.
    assert price.billed_minutes % increment == 0
    assert price.billed_minutes == -(-seconds // (60 * increment)) * increment
    if staff_rate > 0:
        assert price.staff_minutes == -(-staff // increment) * increment
    assert 0 <= price.out_of_hours_minutes <= price.billed_minutes
    # Never below the minimum, and equal to the exact piecewise value rounded once otherwise.
    assert price.amount >= minimum
    normal = price.billed_minutes - price.out_of_hours_minutes
    exact = (
        Fraction(rate) * normal
        + Fraction(rate) * Fraction(factor) * price.out_of_hours_minutes
        + Fraction(staff_rate) * price.staff_minutes
    ) / 60
    reference = (Decimal(exact.numerator) / Decimal(exact.denominator)).quantize(
        Decimal("0.01"), rounding=ROUND_HALF_UP
    )
    assert price.amount == max(reference, minimum)


@settings(max_examples=100, deadline=None)
@given(
    rate=money,
    share=st.decimals(min_value=0, max_value=1, places=3),
    offset=st.integers(min_value=0, max_value=14 * 24 * 60),
    length=st.integers(min_value=15, max_value=8 * 60),
)
def test_a_share_never_exceeds_the_full_price(rate, share, offset, length):
    terms = pricing.Terms(rate, 15, Decimal("0.00"), Decimal("1.5"))
    start = BASE + dt.timedelta(minutes=offset)
    interval = (start, start + dt.timedelta(minutes=length))
    full = pricing.price_share(terms, CAL, interval, share=Decimal(1), why="x").amount
    part = pricing.price_share(terms, CAL, interval, share=share, why="x").amount
    assert part.as_tuple().exponent == -2
    assert Decimal(0) <= part <= full
