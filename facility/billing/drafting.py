"""What belongs on an account's statement for a month, priced: the reading half of drafting.

Billing reads the logbook and the bookings; neither of them knows billing exists.

A statement for account A and month M holds:
- every checked-out session of A that started in M (facility time zone — a session over midnight
  at month end belongs to the month it started in), priced as instrument use;
- every late-cancelled or no-show booking of A that started in M, priced as a share of its
  booked time (a share of 0 puts no line on the statement);
- sessions and bookings of A from an earlier month whose statement was already final when they
  were logged (late entries), so nothing is left unbilled — they are marked as carried over;
- and the adjustment lines staff added (kept by services, not built here).

Anything already on a final statement's line is never taken again. Things that stop the draft
from being finalised (a session still checked in, a missing tariff, mixed currencies) are
returned as problems, in words a manager can act on.
"""

from __future__ import annotations

import datetime as dt
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any

from django.db.models import QuerySet
from django.utils import timezone

from facility.billing import pricing
from facility.billing.hours import FacilityCalendar
from facility.billing.models import (
    Charge,
    ChargeKind,
    Holiday,
    Statement,
    StatementState,
    Tariff,
)
from facility.billing.months import local_month_of, month_bounds
from facility.bookings.models import Booking, BookingState, Purpose
from facility.instruments.models import Instrument
from facility.logbook.models import InstrumentSession
from facility.people.models import RateCategory

BILLED_BOOKING_STATES = (BookingState.LATE_CANCELLED, BookingState.NO_SHOW)

_SESSION_FIELDS = (
    "id",
    "instrument_id",
    "operator_id",
    "operator__profile__rate_category",
    "purpose",
    "started_at",
    "ended_at",
    "staff_minutes",
    "booking_id",
    "booking__starts_at",
    "booking__ends_at",
)
_BOOKING_FIELDS = (
    "id",
    "instrument_id",
    "user_id",
    "user__profile__rate_category",
    "purpose",
    "state",
    "starts_at",
    "ends_at",
)


@dataclass
class PricingContext:
    """Everything pricing needs that is shared by all accounts: tariffs, calendars, the zone."""

    tz: dt.tzinfo
    tariffs: dict[tuple[int, str, str], list[Tariff]]
    calendars: dict[int, FacilityCalendar]
    instrument_codes: dict[int, str]

    @classmethod
    def load(cls, tz: dt.tzinfo | None = None) -> PricingContext:
        tz = tz or timezone.get_default_timezone()
        tariffs: dict[tuple[int, str, str], list[Tariff]] = defaultdict(list)
        for tariff in Tariff.objects.order_by("valid_from"):
            tariffs[(tariff.instrument_id, tariff.rate_category, tariff.purpose)].append(tariff)
        holidays = frozenset(Holiday.objects.values_list("day", flat=True))
        calendars, codes = {}, {}
        for instrument in Instrument.objects.all():
            calendars[instrument.id] = FacilityCalendar.for_instrument(
                instrument, tz=tz, holidays=holidays
            )
            codes[instrument.id] = instrument.code
        return cls(tz=tz, tariffs=dict(tariffs), calendars=calendars, instrument_codes=codes)

    def tariff_for(
        self, instrument_id: int, category: str, purpose: str, day: dt.date
    ) -> Tariff | None:
        """The version in force on local date `day` (validity dates are inclusive)."""
        for tariff in self.tariffs.get((instrument_id, category, purpose), ()):
            if tariff.valid_from <= day and (tariff.valid_to is None or day <= tariff.valid_to):
                return tariff
        return None

    def local(self, moment: dt.datetime) -> dt.datetime:
        return moment.astimezone(self.tz)


@dataclass
class Draft:
    """The priced lines (unsaved, without statement and position) and the problems found."""

    lines: list[Charge] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    session_ids: set[int] = field(default_factory=set)
    booking_ids: set[int] = field(default_factory=set)

    @property
    def currencies(self) -> set[str]:
        return {line.currency for line in self.lines}


def _not_on_final(qs: QuerySet) -> QuerySet:
    return qs.exclude(charges__statement__state=StatementState.FINAL)


def session_candidates(account_id: int, month: dt.date, tz: dt.tzinfo) -> QuerySet:
    start, end = month_bounds(month, tz)
    return _not_on_final(
        InstrumentSession.objects.filter(
            account_id=account_id, ended_at__isnull=False, started_at__gte=start, started_at__lt=end
        )
    )


def booking_candidates(account_id: int, month: dt.date, tz: dt.tzinfo) -> QuerySet:
    start, end = month_bounds(month, tz)
    return _not_on_final(
        Booking.objects.filter(
            account_id=account_id,
            state__in=BILLED_BOOKING_STATES,
            starts_at__gte=start,
            starts_at__lt=end,
        )
    )


def _late_entries(
    qs: QuerySet, moment_field: str, account_id: int, month: dt.date, tz: dt.tzinfo
) -> list[dict[str, Any]]:
    """Rows from earlier months whose own month's statement is already final.

    Taken unless a line of another statement holds them (this draft's own lines do not count:
    drafting again must find the same rows).
    """
    closed = set(
        Statement.objects.filter(account_id=account_id, state=StatementState.FINAL, month__lt=month)
        .order_by()
        .values_list("month", flat=True)
    )
    if not closed:
        return []
    earliest, _ = month_bounds(min(closed), tz)
    start, _ = month_bounds(month, tz)
    elsewhere = Charge.objects.exclude(statement__account_id=account_id, statement__month=month)
    rows = qs.filter(**{f"{moment_field}__gte": earliest, f"{moment_field}__lt": start}).exclude(
        charges__in=elsewhere
    )
    fields = _SESSION_FIELDS if moment_field == "started_at" else _BOOKING_FIELDS
    return [r for r in rows.values(*fields) if local_month_of(r[moment_field], tz) in closed]


def _open_session_problems(account_id: int, month: dt.date, ctx: PricingContext) -> list[str]:
    _, end = month_bounds(month, ctx.tz)
    problems = []
    rows = InstrumentSession.objects.filter(
        account_id=account_id, ended_at__isnull=True, started_at__lt=end
    ).values_list("id", "instrument_id", "started_at")
    for pk, instrument_id, started in rows.order_by("started_at"):
        problems.append(
            f"Session #{pk} on {ctx.instrument_codes.get(instrument_id, '?')} started "
            f"{ctx.local(started):%Y-%m-%d %H:%M} is still checked in; check it out first."
        )
    return problems


def _missing_tariff(ctx: PricingContext, what: str, row: dict, category: str, day: dt.date) -> str:
    code = ctx.instrument_codes.get(row["instrument_id"], "?")
    return (
        f"{what} #{row['id']} on {code} ({day:%Y-%m-%d}) is not priced: no {category} tariff "
        f"for {row['purpose']} in force that day; add one and draft again."
    )


def _carried(row_month: dt.date, month: dt.date) -> str:
    if row_month == month:
        return ""
    return f"Logged after {row_month:%Y-%m} was final: "


def _price_session(row: dict, month: dt.date, ctx: PricingContext, draft: Draft) -> None:
    started, ended = row["started_at"], row["ended_at"]
    category = row["operator__profile__rate_category"] or RateCategory.INTERNAL
    day = ctx.local(started).date()
    tariff = ctx.tariff_for(row["instrument_id"], category, row["purpose"], day)
    if tariff is None:
        # Service time (maintenance) is downtime, not a sale, unless a tariff says otherwise.
        if row["purpose"] != Purpose.SERVICE:
            draft.problems.append(_missing_tariff(ctx, "Session", row, category, day))
        return
    booked = None
    if row["booking_id"] is not None:
        booked = (row["booking__starts_at"], row["booking__ends_at"])
    interval = pricing.charged_interval(tariff.charge_basis, (started, ended), booked)
    price = pricing.price_use(
        pricing.Terms.from_tariff(tariff),
        ctx.calendars[row["instrument_id"]],
        interval,
        staff_minutes=row["staff_minutes"] or 0,
    )
    prefix = _carried(local_month_of(started, ctx.tz), month)
    draft.session_ids.add(row["id"])
    if row["booking_id"] is not None:
        draft.booking_ids.add(row["booking_id"])
    draft.lines.append(
        Charge(
            kind=ChargeKind.USE,
            session_id=row["id"],
            booking_id=row["booking_id"],
            tariff=tariff,
            instrument_id=row["instrument_id"],
            user_id=row["operator_id"],
            purpose=row["purpose"],
            starts_at=interval[0],
            ends_at=interval[1],
            billed_minutes=price.billed_minutes,
            out_of_hours_minutes=price.out_of_hours_minutes,
            staff_minutes=price.staff_minutes,
            hourly_rate=tariff.hourly_rate,
            staff_hourly_rate=tariff.staff_hourly_rate,
            out_of_hours_factor=tariff.out_of_hours_factor,
            currency=tariff.currency,
            amount=price.amount,
            description=(prefix + price.description)[:300],
        )
    )


def price_booking(row: dict, month: dt.date, ctx: PricingContext, draft: Draft) -> None:
    """Price a late-cancelled or no-show booking (a row of _BOOKING_FIELDS) into `draft`."""
    category = row["user__profile__rate_category"] or RateCategory.INTERNAL
    day = ctx.local(row["starts_at"]).date()
    tariff = ctx.tariff_for(row["instrument_id"], category, row["purpose"], day)
    if tariff is None:
        if row["purpose"] != Purpose.SERVICE:
            draft.problems.append(_missing_tariff(ctx, "Booking", row, category, day))
        return
    late = row["state"] == BookingState.LATE_CANCELLED
    share = tariff.late_cancellation_share if late else tariff.no_show_share
    if share == 0:
        return
    interval = (row["starts_at"], row["ends_at"])
    price = pricing.price_share(
        pricing.Terms.from_tariff(tariff),
        ctx.calendars[row["instrument_id"]],
        interval,
        share=share,
        why="Cancelled late" if late else "No-show",
    )
    prefix = _carried(local_month_of(row["starts_at"], ctx.tz), month)
    draft.booking_ids.add(row["id"])
    draft.lines.append(
        Charge(
            kind=ChargeKind.LATE_CANCELLATION if late else ChargeKind.NO_SHOW,
            booking_id=row["id"],
            tariff=tariff,
            instrument_id=row["instrument_id"],
            user_id=row["user_id"],
            purpose=row["purpose"],
            starts_at=interval[0],
            ends_at=interval[1],
            billed_minutes=price.billed_minutes,
            out_of_hours_minutes=price.out_of_hours_minutes,
            hourly_rate=tariff.hourly_rate,
            out_of_hours_factor=tariff.out_of_hours_factor,
            share=share,
            currency=tariff.currency,
            amount=price.amount,
            description=(prefix + price.description)[:300],
        )
    )


def _sort_key(line: Charge) -> tuple:
    return (line.starts_at, line.kind, line.session_id or 0, line.booking_id or 0)


def build(account_id: int, month: dt.date, ctx: PricingContext) -> Draft:
    """Price everything that belongs on `account_id`'s statement for `month`."""
    draft = Draft(problems=_open_session_problems(account_id, month, ctx))
    sessions = list(
        session_candidates(account_id, month, ctx.tz).values(*_SESSION_FIELDS)
    ) + _late_entries(
        InstrumentSession.objects.filter(account_id=account_id, ended_at__isnull=False),
        "started_at",
        account_id,
        month,
        ctx.tz,
    )
    bookings = list(
        booking_candidates(account_id, month, ctx.tz).values(*_BOOKING_FIELDS)
    ) + _late_entries(
        Booking.objects.filter(account_id=account_id, state__in=BILLED_BOOKING_STATES),
        "starts_at",
        account_id,
        month,
        ctx.tz,
    )
    for row in sessions:
        _price_session(row, month, ctx, draft)
    for row in bookings:
        price_booking(row, month, ctx, draft)
    draft.lines.sort(key=_sort_key)
    if len(draft.currencies) > 1:
        draft.problems.append(
            "The lines are in more than one currency ("
            + ", ".join(sorted(draft.currencies))
            + "); a statement holds one. Align the tariffs' currencies and draft again."
        )
    return draft


def accounts_with_activity(month: dt.date, tz: dt.tzinfo) -> set[int]:
    """Accounts that may need a statement for `month` (sessions, billed bookings, late entries).

    Late entries from earlier months are found through the accounts that have a final
    statement before `month` and unbilled closed sessions or bookings before it.
    """
    start, end = month_bounds(month, tz)
    ids = set(
        InstrumentSession.objects.filter(started_at__gte=start, started_at__lt=end)
        .values_list("account_id", flat=True)
        .distinct()
    )
    ids |= set(
        Booking.objects.filter(
            state__in=BILLED_BOOKING_STATES, starts_at__gte=start, starts_at__lt=end
        )
        .values_list("account_id", flat=True)
        .distinct()
    )
    closed_accounts = Statement.objects.filter(state=StatementState.FINAL, month__lt=month).values(
        "account_id"
    )
    ids |= set(
        InstrumentSession.objects.filter(
            account_id__in=closed_accounts,
            ended_at__isnull=False,
            started_at__lt=start,
            charges__isnull=True,
        )
        .values_list("account_id", flat=True)
        .distinct()
    )
    ids |= set(
        Booking.objects.filter(
            account_id__in=closed_accounts,
            state__in=BILLED_BOOKING_STATES,
            starts_at__lt=start,
            charges__isnull=True,
        )
        .values_list("account_id", flat=True)
        .distinct()
    )
    ids |= set(
        Statement.objects.filter(month=month, state=StatementState.DRAFT).values_list(
            "account_id", flat=True
        )
    )
    return ids
