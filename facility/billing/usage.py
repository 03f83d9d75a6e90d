"""Usage reports: how the instruments were booked and used, per month. Reads only.

Every figure comes from a database aggregate (SUM of end − start, grouped and filtered in SQL);
Python only combines a handful of aggregate rows and turns durations into hours. Definitions:

- booked hours: bookings that held the instrument (requested, confirmed, done, no-show, late
  cancelled), service bookings excluded;
- used hours: checked-out sessions, service sessions excluded;
- no-show and late-cancelled hours: the booked time of those bookings;
- downtime: service / maintenance bookings (requested, confirmed or done);
- bookable hours: the instrument's normal hours in the month, holidays excluded (calendar);
- utilisation: used ÷ bookable hours. Out-of-hours use counts as use, so it can exceed 1.

A booking or session belongs to the month (facility time zone) in which it starts.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import asdict, dataclass
from decimal import ROUND_HALF_UP, Decimal
from typing import Literal

from django.db.models import Count, DurationField, ExpressionWrapper, F, Q, Sum
from django.db.models.functions import TruncMonth
from django.utils import timezone

from facility.billing.hours import FacilityCalendar
from facility.billing.models import Holiday
from facility.billing.months import month_bounds, next_month
from facility.bookings.models import Booking, BookingState, Purpose
from facility.instruments.models import Instrument
from facility.logbook.models import InstrumentSession
from facility.people.models import RateCategory

HOUR = Decimal("0.01")
RATIO = Decimal("0.001")
HELD = (
    BookingState.REQUESTED,
    BookingState.CONFIRMED,
    BookingState.DONE,
    BookingState.NO_SHOW,
    BookingState.LATE_CANCELLED,
)
SERVICE_HELD = (BookingState.REQUESTED, BookingState.CONFIRMED, BookingState.DONE)

Dimension = Literal["group", "rate_category", "purpose"]
_SESSION_KEYS = {
    "group": "account__group__name",
    "rate_category": "operator__profile__rate_category",
    "purpose": "purpose",
}
_BOOKING_KEYS = {
    "group": "account__group__name",
    "rate_category": "user__profile__rate_category",
    "purpose": "purpose",
}


def _booked() -> ExpressionWrapper:
    return ExpressionWrapper(F("ends_at") - F("starts_at"), output_field=DurationField())


def _used() -> ExpressionWrapper:
    return ExpressionWrapper(F("ended_at") - F("started_at"), output_field=DurationField())


def hours(length: dt.timedelta | None) -> Decimal:
    """A duration as hours with two places (an aggregate of nothing is 0)."""
    if not length:
        return Decimal("0.00")
    micro = Decimal(length // dt.timedelta(microseconds=1))
    return (micro / Decimal(3_600_000_000)).quantize(HOUR, rounding=ROUND_HALF_UP)


def _ratio(part: Decimal, whole: Decimal) -> Decimal | None:
    return (part / whole).quantize(RATIO, rounding=ROUND_HALF_UP) if whole else None


@dataclass(frozen=True)
class InstrumentUsage:
    month: dt.date
    instrument_id: int
    instrument: str
    name: str
    booked_hours: Decimal
    used_hours: Decimal
    no_show_hours: Decimal
    late_cancelled_hours: Decimal
    downtime_hours: Decimal
    bookable_hours: Decimal
    utilisation: Decimal | None
    sessions: int
    bookings: int

    def as_dict(self) -> dict[str, str | int | None]:
        """JSON-ready: decimals as strings, the month as YYYY-MM."""
        out = {k: (str(v) if isinstance(v, Decimal) else v) for k, v in asdict(self).items()}
        out["month"] = f"{self.month:%Y-%m}"
        return out


def _in_month(prefix: str, month: dt.date, tz: dt.tzinfo) -> Q:
    start, end = month_bounds(month, tz)
    return Q(**{f"{prefix}__gte": start, f"{prefix}__lt": end})


def bookable_hours(
    instrument: Instrument,
    month: dt.date,
    tz: dt.tzinfo | None = None,
    *,
    holidays: frozenset[dt.date] | None = None,
) -> Decimal:
    """Normal hours of `instrument` in `month` from the facility calendar (holidays excluded)."""
    tz = tz or timezone.get_default_timezone()
    last = next_month(month) - dt.timedelta(days=1)
    if holidays is None:
        holidays = frozenset(
            Holiday.objects.filter(day__gte=month, day__lte=last).values_list("day", flat=True)
        )
    calendar = FacilityCalendar.for_instrument(instrument, tz=tz, holidays=holidays)
    return hours(calendar.normal_hours(month, last))


def instrument_usage(month: dt.date, *, tz: dt.tzinfo | None = None) -> list[InstrumentUsage]:
    """One row per active instrument (and any with activity) for `month`."""
    tz = tz or timezone.get_default_timezone()
    not_service = ~Q(purpose=Purpose.SERVICE)
    bookings = {
        row["instrument_id"]: row
        for row in Booking.objects.filter(_in_month("starts_at", month, tz))
        .values("instrument_id")
        .annotate(
            booked=Sum(_booked(), filter=Q(state__in=HELD) & not_service),
            no_show=Sum(_booked(), filter=Q(state=BookingState.NO_SHOW) & not_service),
            late=Sum(_booked(), filter=Q(state=BookingState.LATE_CANCELLED) & not_service),
            downtime=Sum(_booked(), filter=Q(state__in=SERVICE_HELD, purpose=Purpose.SERVICE)),
            n=Count("id", filter=Q(state__in=HELD) & not_service),
        )
    }
    sessions = {
        row["instrument_id"]: row
        for row in InstrumentSession.objects.filter(
            _in_month("started_at", month, tz), ended_at__isnull=False
        )
        .values("instrument_id")
        .annotate(used=Sum(_used(), filter=not_service), n=Count("id", filter=not_service))
    }
    wanted = Q(is_active=True) | Q(pk__in=set(bookings) | set(sessions))
    holidays = frozenset(Holiday.objects.values_list("day", flat=True))
    rows = []
    for instrument in Instrument.objects.filter(wanted).order_by("code"):
        b = bookings.get(instrument.id, {})
        s = sessions.get(instrument.id, {})
        bookable = bookable_hours(instrument, month, tz, holidays=holidays)
        used = hours(s.get("used"))
        rows.append(
            InstrumentUsage(
                month=month,
                instrument_id=instrument.id,
                instrument=instrument.code,
                name=instrument.name,
                booked_hours=hours(b.get("booked")),
                used_hours=used,
                no_show_hours=hours(b.get("no_show")),
                late_cancelled_hours=hours(b.get("late")),
                downtime_hours=hours(b.get("downtime")),
                bookable_hours=bookable,
                utilisation=_ratio(used, bookable),
                sessions=s.get("n") or 0,
                bookings=b.get("n") or 0,
            )
        )
    return rows


@dataclass(frozen=True)
class BreakdownRow:
    month: dt.date
    instrument: str
    dimension: str
    key: str
    label: str
    booked_hours: Decimal
    used_hours: Decimal
    sessions: int


def _label(dimension: str, key: str) -> str:
    if dimension == "rate_category":
        return dict(RateCategory.choices).get(key, key)
    if dimension == "purpose":
        return dict(Purpose.choices).get(key, key)
    return key


def usage_breakdown(
    month: dt.date, dimension: Dimension, *, tz: dt.tzinfo | None = None
) -> list[BreakdownRow]:
    """Booked and used hours per instrument and group, rate category or purpose.

    Service time is left out of the group and rate-category breakdowns (it is the facility's,
    not a user's) and shown as its own purpose in the purpose breakdown.
    """
    if dimension not in _SESSION_KEYS:
        raise ValueError(f"dimension must be one of {', '.join(_SESSION_KEYS)}")
    tz = tz or timezone.get_default_timezone()
    keep = Q() if dimension == "purpose" else ~Q(purpose=Purpose.SERVICE)
    s_key, b_key = _SESSION_KEYS[dimension], _BOOKING_KEYS[dimension]
    used = (
        InstrumentSession.objects.filter(
            _in_month("started_at", month, tz), keep, ended_at__isnull=False
        )
        .values("instrument__code", s_key)
        .annotate(used=Sum(_used()), n=Count("id"))
    )
    booked = (
        Booking.objects.filter(_in_month("starts_at", month, tz), keep)
        .filter(
            Q(state__in=HELD) & ~Q(purpose=Purpose.SERVICE)
            | Q(state__in=SERVICE_HELD, purpose=Purpose.SERVICE)
        )
        .values("instrument__code", b_key)
        .annotate(booked=Sum(_booked()))
    )
    merged: dict[tuple[str, str], dict] = {}
    for row in used:
        key = (row["instrument__code"], row[s_key] or RateCategory.INTERNAL)
        merged.setdefault(key, {}).update(used=row["used"], n=row["n"])
    for row in booked:
        key = (row["instrument__code"], row[b_key] or RateCategory.INTERNAL)
        slot = merged.setdefault(key, {})
        slot["booked"] = (slot.get("booked") or dt.timedelta(0)) + (
            row["booked"] or dt.timedelta(0)
        )
    return [
        BreakdownRow(
            month=month,
            instrument=code,
            dimension=dimension,
            key=key,
            label=_label(dimension, key),
            booked_hours=hours(values.get("booked")),
            used_hours=hours(values.get("used")),
            sessions=values.get("n", 0),
        )
        for (code, key), values in sorted(merged.items())
    ]


@dataclass(frozen=True)
class TopUser:
    user_id: int
    username: str
    used_hours: Decimal
    sessions: int


def top_users(
    month: dt.date,
    *,
    limit: int = 10,
    instrument: Instrument | None = None,
    tz: dt.tzinfo | None = None,
) -> list[TopUser]:
    """The people who used the most instrument time in `month` (service excluded)."""
    tz = tz or timezone.get_default_timezone()
    qs = InstrumentSession.objects.filter(
        _in_month("started_at", month, tz), ended_at__isnull=False
    ).exclude(purpose=Purpose.SERVICE)
    if instrument is not None:
        qs = qs.filter(instrument=instrument)
    rows = (
        qs.values("operator_id", "operator__username")
        .annotate(used=Sum(_used()), n=Count("id"))
        .order_by("-used", "operator__username")[:limit]
    )
    return [
        TopUser(
            user_id=row["operator_id"],
            username=row["operator__username"],
            used_hours=hours(row["used"]),
            sessions=row["n"],
        )
        for row in rows
    ]


@dataclass(frozen=True)
class MonthlyHours:
    month: dt.date
    instrument: str
    used_hours: Decimal
    booked_hours: Decimal


def _month_key(value: dt.datetime | dt.date, tz: dt.tzinfo) -> dt.date:
    if isinstance(value, dt.datetime):
        value = value.astimezone(tz) if timezone.is_aware(value) else value
        return value.date().replace(day=1)
    return value.replace(day=1)


def monthly_hours(
    first: dt.date, last: dt.date, *, tz: dt.tzinfo | None = None
) -> list[MonthlyHours]:
    """Used and booked hours per instrument for each month from `first` to `last` inclusive."""
    tz = tz or timezone.get_default_timezone()
    start, _ = month_bounds(first, tz)
    _, end = month_bounds(last, tz)
    used = (
        InstrumentSession.objects.filter(
            started_at__gte=start, started_at__lt=end, ended_at__isnull=False
        )
        .exclude(purpose=Purpose.SERVICE)
        .annotate(m=TruncMonth("started_at", tzinfo=tz))
        .values("m", "instrument__code")
        .annotate(used=Sum(_used()))
    )
    booked = (
        Booking.objects.filter(starts_at__gte=start, starts_at__lt=end, state__in=HELD)
        .exclude(purpose=Purpose.SERVICE)
        .annotate(m=TruncMonth("starts_at", tzinfo=tz))
        .values("m", "instrument__code")
        .annotate(booked=Sum(_booked()))
    )
    merged: dict[tuple[dt.date, str], dict] = {}
    for row in used:
        merged.setdefault((_month_key(row["m"], tz), row["instrument__code"]), {})["used"] = row[
            "used"
        ]
    for row in booked:
        merged.setdefault((_month_key(row["m"], tz), row["instrument__code"]), {})["booked"] = row[
            "booked"
        ]
    return [
        MonthlyHours(month, code, hours(v.get("used")), hours(v.get("booked")))
        for (month, code), v in sorted(merged.items())
    ]


@dataclass(frozen=True)
class UtilisationPoint:
    month: dt.date
    instrument: str
    used_hours: Decimal
    bookable_hours: Decimal
    utilisation: Decimal | None


def utilisation_series(
    first: dt.date, last: dt.date, *, tz: dt.tzinfo | None = None
) -> list[UtilisationPoint]:
    """Utilisation per active instrument and month, e.g. over a year for the chart."""
    tz = tz or timezone.get_default_timezone()
    used = {(m.month, m.instrument): m.used_hours for m in monthly_hours(first, last, tz=tz)}
    holidays = frozenset(Holiday.objects.values_list("day", flat=True))
    points = []
    for instrument in Instrument.objects.filter(is_active=True).order_by("code"):
        month = first
        while month <= last:
            bookable = bookable_hours(instrument, month, tz, holidays=holidays)
            hours_used = used.get((month, instrument.code), Decimal("0.00"))
            points.append(
                UtilisationPoint(
                    month, instrument.code, hours_used, bookable, _ratio(hours_used, bookable)
                )
            )
            month = next_month(month)
    return points
