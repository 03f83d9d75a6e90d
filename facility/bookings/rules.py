"""The booking rules, as checks that raise a domain error a person can act on.

Kept apart from services.py so that `book` and `move` apply exactly the same rules.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.models import AbstractBaseUser
from django.utils import timezone

from facility.bookings.models import Purpose
from facility.errors import Closed, Invalid, NotAllowed, NotTrained
from facility.instruments.models import Instrument, TrainingLevel, TrainingRecord
from facility.people.models import Account
from facility.people.queries import group_ids_of, is_staff


def format_moment(moment: dt.datetime) -> str:
    return timezone.localtime(moment).strftime("%a %d %b %Y %H:%M")


def check_times(starts_at: dt.datetime, ends_at: dt.datetime) -> None:
    if timezone.is_naive(starts_at) or timezone.is_naive(ends_at):
        raise Invalid("Start and end must carry a time zone.")
    if ends_at <= starts_at:
        raise Invalid(
            "The booking must end after it starts.",
            fields={"ends_at": ["Must be after the start."]},
        )


def check_instrument_open(instrument: Instrument) -> None:
    if not instrument.is_active:
        raise Closed(f"{instrument.name} is no longer in use and cannot be booked.")
    if instrument.out_of_service:
        raise Closed(
            f"{instrument.name} is out of service; ask the facility staff when it returns."
        )


def check_not_past(starts_at: dt.datetime, *, by: AbstractBaseUser, now: dt.datetime) -> None:
    if starts_at < now and not is_staff(by):
        raise Invalid(
            f"{format_moment(starts_at)} is in the past; choose a start from now on.",
            fields={"starts_at": ["In the past."]},
        )


def check_length(instrument: Instrument, starts_at: dt.datetime, ends_at: dt.datetime) -> None:
    minutes = (ends_at - starts_at).total_seconds() / 60
    if minutes > instrument.max_booking_minutes:
        limit = instrument.max_booking_minutes
        raise Invalid(
            f"Bookings on {instrument.name} may last at most {limit // 60} h {limit % 60:02d} min; "
            f"this one lasts {int(minutes) // 60} h {int(minutes) % 60:02d} min. Split it or ask staff.",
            fields={"ends_at": ["Longer than the maximum booking length."]},
        )


def is_out_of_hours(instrument: Instrument, starts_at: dt.datetime, ends_at: dt.datetime) -> bool:
    """True when any part of [starts_at, ends_at) lies outside the instrument's normal hours.

    Normal hours are a daily window on the instrument's normal weekdays, in the facility's local
    time zone (so a DST change does not move them).
    """
    start = timezone.localtime(starts_at)
    end = timezone.localtime(ends_at)
    day = start.date()
    while day <= end.date():
        tz = start.tzinfo
        window_start = dt.datetime.combine(day, instrument.bookable_from, tzinfo=tz)
        window_end = dt.datetime.combine(day, instrument.bookable_until, tzinfo=tz)
        part_start = max(start, dt.datetime.combine(day, dt.time.min, tzinfo=tz))
        part_end = min(end, dt.datetime.combine(day + dt.timedelta(days=1), dt.time.min, tzinfo=tz))
        if part_end > part_start:
            if day.isoweekday() not in instrument.normal_weekdays:
                return True
            if part_start < window_start or part_end > window_end:
                return True
        day += dt.timedelta(days=1)
    return False


def required_level(purpose: str, out_of_hours: bool) -> TrainingLevel:
    if out_of_hours:
        return TrainingLevel.OUT_OF_HOURS
    if purpose in (Purpose.ASSISTED, Purpose.TRAINING):
        # Staff are present: a supervised user may come.
        return TrainingLevel.SUPERVISED
    return TrainingLevel.INDEPENDENT


def check_training(
    user: AbstractBaseUser,
    instrument: Instrument,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    *,
    level: TrainingLevel,
) -> None:
    record = TrainingRecord.objects.filter(user=user, instrument=instrument).first()
    if record is None:
        raise NotTrained(
            f"{user.get_username()} has no training record for {instrument.name}; "
            "ask the facility staff to arrange training."
        )
    first, last = timezone.localdate(starts_at), timezone.localdate(ends_at)
    if not (record.valid_on(first) and record.valid_on(last)):
        until = record.expires_on.isoformat() if record.expires_on else "?"
        raise NotTrained(
            f"The training record for {instrument.name} is not valid on {first.isoformat()} "
            f"(it ran until {until}); ask the facility staff to renew it."
        )
    if record.level < level:
        raise NotTrained(
            f"This booking needs the '{TrainingLevel(level).label}' training level on "
            f"{instrument.name}; the record holds '{record.get_level_display()}'."
            + (
                " Book within normal hours, or ask staff for the out-of-hours level."
                if level == TrainingLevel.OUT_OF_HOURS
                else " Book an assisted or training slot instead."
            )
        )


def check_hours(
    instrument: Instrument,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    *,
    staff_override: bool,
) -> bool:
    """Returns whether the slot is out of hours; refuses one the instrument does not allow."""
    out = is_out_of_hours(instrument, starts_at, ends_at)
    if out and not instrument.allows_out_of_hours and not staff_override:
        raise Invalid(
            f"{instrument.name} can be booked only from {instrument.bookable_from:%H:%M} to "
            f"{instrument.bookable_until:%H:%M} on its normal days; choose a slot inside those hours.",
            fields={"starts_at": ["Outside bookable hours."]},
        )
    return out


def check_account(
    account: Account, user: AbstractBaseUser, starts_at: dt.datetime, ends_at: dt.datetime
) -> None:
    if account.group_id not in group_ids_of(user):
        raise NotAllowed(
            f"Account {account.code} does not belong to any group of {user.get_username()}; "
            "choose one of your group's accounts.",
            fields={"account": ["Not one of your groups' accounts."]},
        )
    first, last = timezone.localdate(starts_at), timezone.localdate(ends_at)
    if not account.covers(first, last):
        ends = account.valid_to.isoformat() if account.valid_to else "open-ended"
        state = "inactive" if not account.is_active else f"valid {account.valid_from} to {ends}"
        raise Invalid(
            f"Account {account.code} is {state} and does not cover {first.isoformat()}; "
            "choose another account or ask your group leader.",
            fields={"account": ["Not valid on these dates."]},
        )


def check_purpose(purpose: str, *, by: AbstractBaseUser) -> None:
    if purpose not in Purpose.values:
        raise Invalid(f"Unknown purpose {purpose!r}; use one of {', '.join(Purpose.values)}.")
    if purpose == Purpose.SERVICE and not is_staff(by):
        raise NotAllowed("Only facility staff can book service time.")
