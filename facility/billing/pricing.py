"""Pricing of one session or booking under one tariff. Pure: no database, no floats.

The rules (common practice in shared-instrument facilities, no single source; DOMAIN.md):

- The charged interval is the used time, the booked time, or the greater of the two, as the
  tariff's charge basis says (a walk-up without a booking always uses the used time).
- Its length is rounded *up* to a multiple of the tariff's increment. The rounded-up time is
  counted in the part of the calendar where the interval ends (normal or out of hours); the
  other part is counted to the nearest minute.
- Out-of-hours minutes cost the hourly rate times the out-of-hours factor ("piecewise").
- Logged staff time (assisted use) is rounded up to the same increment and costs the staff rate.
- A session costs at least the tariff's minimum charge.
- A late cancellation or no-show costs a share of the price of the booked time (no staff time,
  no minimum charge).
- All arithmetic is exact (fractions of Decimals); the line amount is quantized once, to two
  places, rounding half up (Python `decimal.ROUND_HALF_UP`: ties away from zero).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal
from fractions import Fraction
from typing import TYPE_CHECKING

from facility.billing.hours import FacilityCalendar, TimeSplit

if TYPE_CHECKING:
    from facility.billing.models import Tariff

ZERO = Decimal("0.00")
CENT = Decimal("0.01")
_US = dt.timedelta(microseconds=1)
_MINUTE_US = 60_000_000

Interval = tuple[dt.datetime, dt.datetime]


@dataclass(frozen=True)
class Terms:
    """The parts of a tariff that set a price."""

    hourly_rate: Decimal
    increment_minutes: int = 15
    minimum_charge: Decimal = ZERO
    out_of_hours_factor: Decimal = Decimal("1")
    staff_hourly_rate: Decimal = ZERO

    def __post_init__(self) -> None:
        if self.increment_minutes < 1:
            raise ValueError("the billing increment must be at least one minute")
        for name in ("hourly_rate", "minimum_charge", "out_of_hours_factor", "staff_hourly_rate"):
            value = getattr(self, name)
            if not isinstance(value, Decimal):
                raise TypeError(f"{name} must be a Decimal, not {type(value).__name__}")
            if value < 0:
                raise ValueError(f"{name} must not be negative")

    @classmethod
    def from_tariff(cls, tariff: Tariff) -> Terms:
        return cls(
            hourly_rate=tariff.hourly_rate,
            increment_minutes=tariff.increment_minutes,
            minimum_charge=tariff.minimum_charge,
            out_of_hours_factor=tariff.out_of_hours_factor,
            staff_hourly_rate=tariff.staff_hourly_rate,
        )


@dataclass(frozen=True)
class Price:
    billed_minutes: int
    out_of_hours_minutes: int
    staff_minutes: int
    amount: Decimal
    minimum_applied: bool
    description: str


def quantize_money(value: Fraction | Decimal | int) -> Decimal:
    """Two places, half up (ties away from zero), computed exactly from a fraction."""
    exact = Fraction(value)
    sign = -1 if exact < 0 else 1
    cents = (abs(exact) * 100 + Fraction(1, 2)).__floor__()
    return (Decimal(sign * cents) * CENT).quantize(CENT, rounding=ROUND_HALF_UP)


def round_up_minutes(length: dt.timedelta, increment: int) -> int:
    """Minutes after rounding `length` up to a multiple of `increment` (0 stays 0)."""
    micro = max(0, length // _US)
    step = increment * _MINUTE_US
    return -(-micro // step) * increment


def nearest_minute(length: dt.timedelta) -> int:
    """Whole minutes, half a minute rounding up."""
    return (2 * (length // _US) + _MINUTE_US) // (2 * _MINUTE_US)


def charged_interval(basis: str, used: Interval, booked: Interval | None) -> Interval:
    """The interval a tariff's charge basis prices: 'used', 'booked' or 'greater'."""
    if booked is None or basis == "used":
        return used
    if basis == "booked":
        return booked
    if basis == "greater":
        return booked if _length(booked) > _length(used) else used
    raise ValueError(f"unknown charge basis {basis!r}")


def _length(interval: Interval) -> dt.timedelta:
    return interval[1].astimezone(dt.UTC) - interval[0].astimezone(dt.UTC)


def billed_minutes(split: TimeSplit, increment: int) -> tuple[int, int]:
    """(normal, out-of-hours) billed minutes; their sum is the length rounded up."""
    billed = round_up_minutes(split.total, increment)
    if split.ends_out_of_hours:
        normal = min(billed, nearest_minute(split.normal))
        return normal, billed - normal
    out = min(billed, nearest_minute(split.out_of_hours))
    return billed - out, out


def hm(minutes: int) -> str:
    return f"{minutes // 60} h {minutes % 60:02d} min"


def _factor(value: Decimal) -> str:
    return format(value.normalize(), "f")


def _time_words(terms: Terms, normal: int, out: int) -> str:
    text = f"{hm(normal + out)} at {terms.hourly_rate}/h"
    if out and normal:
        text += (
            f" ({hm(normal)} normal, {hm(out)} out of hours ×{_factor(terms.out_of_hours_factor)})"
        )
    elif out:
        text += f" (out of hours ×{_factor(terms.out_of_hours_factor)})"
    return text


def _time_value(terms: Terms, normal: int, out: int) -> Fraction:
    rate = Fraction(terms.hourly_rate)
    return (normal * rate + out * rate * Fraction(terms.out_of_hours_factor)) / 60


def price_use(
    terms: Terms, calendar: FacilityCalendar, interval: Interval, *, staff_minutes: int = 0
) -> Price:
    """The price of using an instrument over `interval`, with optional logged staff time."""
    if staff_minutes < 0:
        raise ValueError("staff minutes must not be negative")
    normal, out = billed_minutes(calendar.split(*interval), terms.increment_minutes)
    staff = 0
    if terms.staff_hourly_rate > 0 and staff_minutes:
        staff = round_up_minutes(dt.timedelta(minutes=staff_minutes), terms.increment_minutes)
    exact = _time_value(terms, normal, out) + staff * Fraction(terms.staff_hourly_rate) / 60
    amount = quantize_money(exact)
    words = _time_words(terms, normal, out)
    if staff:
        words += f" + staff {hm(staff)} at {terms.staff_hourly_rate}/h"
    minimum_applied = amount < terms.minimum_charge
    if minimum_applied:
        amount = terms.minimum_charge.quantize(CENT)
        words += f"; minimum charge {amount} applies"
    return Price(normal + out, out, staff, amount, minimum_applied, words[:300])


def price_share(
    terms: Terms, calendar: FacilityCalendar, interval: Interval, *, share: Decimal, why: str
) -> Price:
    """A share of the price of the booked `interval` (late cancellation, no-show)."""
    if not isinstance(share, Decimal) or not Decimal(0) <= share <= Decimal(1):
        raise ValueError("the share must be a Decimal from 0 to 1")
    normal, out = billed_minutes(calendar.split(*interval), terms.increment_minutes)
    amount = quantize_money(_time_value(terms, normal, out) * Fraction(share))
    percent = _factor(share * 100)
    words = f"{why}: {percent} % of booked {_time_words(terms, normal, out)}"
    return Price(normal + out, out, 0, amount, False, words[:300])
