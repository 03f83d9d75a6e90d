"""Upkeep rules shared by the services and the admin forms. Each raises a facility error."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal, InvalidOperation
from typing import Any

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Q
from django.utils.text import slugify

from facility.errors import Conflict, Invalid, NotAllowed
from facility.instruments.models import EmitterType, Instrument, Pump
from facility.logbook.models import InstrumentSession
from facility.people.queries import is_staff
from facility.upkeep.models import (
    METERED_COUNTERS,
    PUMP_KINDS,
    Counter,
    ServiceKind,
)

# How far ahead of the server clock a recorded time may be: the clock of the PC where staff type
# it may run a little fast (common practice, no source).
CLOCK_SLACK = dt.timedelta(minutes=5)
RESET_KINDS = (ServiceKind.EMITTER_CHANGE, *PUMP_KINDS, ServiceKind.PART_REPLACEMENT)


def check_staff(by: AbstractBaseUser | None, action: str) -> None:
    if not is_staff(by):
        raise NotAllowed(f"Only facility staff can {action}.")


def check_choice(value: str, choices: Any, field: str) -> str:
    if value not in choices.values:
        raise Invalid(
            f"Unknown {field.replace('_', ' ')} {value!r}; use one of {', '.join(choices.values)}.",
            fields={field: ["Unknown value."]},
        )
    return value


def check_not_future(at: dt.datetime, now: dt.datetime, field: str) -> None:
    if at > now + CLOCK_SLACK:
        raise Invalid(
            "That time is in the future; record it once it has happened.",
            fields={field: ["In the future."]},
        )


def check_pump(instrument: Instrument, pump: Pump | None, *, needed: bool, what: str) -> None:
    if needed and pump is None:
        raise Invalid(f"Choose the pump for a {what}.", fields={"pump": ["Required."]})
    if not needed and pump is not None:
        raise Invalid(f"A {what} is not about a pump.", fields={"pump": ["Leave empty."]})
    if pump is not None and pump.instrument_id != instrument.pk:
        raise Invalid(
            f"Pump {pump.name!r} belongs to another instrument, not {instrument.name}.",
            fields={"pump": ["Not on this instrument."]},
        )


def clean_part(part: str, *, needed: bool, what: str) -> str:
    """A wear part's name as a slug (chamber-door-seal), so the limit and the event match."""
    slug = slugify(part or "")
    if needed and not slug:
        raise Invalid(
            f"Name the wear part for a {what}, e.g. chamber-door-seal.",
            fields={"part": ["Required."]},
        )
    if not needed and slug:
        raise Invalid(f"A {what} names no wear part.", fields={"part": ["Leave empty."]})
    return slug


def check_has_emitter(instrument: Instrument) -> None:
    if instrument.emitter_type == EmitterType.NONE:
        raise Invalid(f"{instrument.name} has no emitter.")


def check_no_session_running(instrument: Instrument, at: dt.datetime) -> None:
    """A part is changed while nobody works at the instrument; a reset inside a logged session
    would split that session's hours between the old part and the new one."""
    running = InstrumentSession.objects.filter(instrument=instrument, started_at__lt=at).filter(
        Q(ended_at__gt=at) | Q(ended_at__isnull=True)
    )
    session = running.first()
    if session is not None:
        raise Conflict(
            f"A session was running on {instrument.name} at that time (from "
            f"{session.started_at:%Y-%m-%d %H:%M}); a part is changed between sessions — check "
            "the time, or correct the session first.",
            fields={"performed_at": ["Inside a logged session."]},
        )


def clean_amount(value: Any, field: str, *, places: str, positive: bool) -> Decimal:
    try:
        amount = Decimal(str(value))
    except (InvalidOperation, ValueError):
        raise Invalid(
            f"{field.replace('_', ' ')} must be a number.", fields={field: ["Number."]}
        ) from None
    if not amount.is_finite() or amount < 0 or (positive and amount == 0):
        bound = "more than 0" if positive else "0 or more"
        raise Invalid(f"{field.replace('_', ' ')} must be {bound}.", fields={field: [bound]})
    return amount.quantize(Decimal(places))


def check_service_event(
    *,
    instrument: Instrument,
    kind: str,
    pump: Pump | None,
    part: str,
    performed_at: dt.datetime,
    cost: Any,
    now: dt.datetime,
) -> tuple[str, Decimal | None]:
    """Validate a service event; returns the cleaned part name and cost."""
    check_choice(kind, ServiceKind, "kind")
    label = ServiceKind(kind).label.lower()
    check_pump(instrument, pump, needed=kind in PUMP_KINDS, what=label)
    part = clean_part(part, needed=kind == ServiceKind.PART_REPLACEMENT, what=label)
    if kind == ServiceKind.EMITTER_CHANGE:
        check_has_emitter(instrument)
    check_not_future(performed_at, now, "performed_at")
    if kind in RESET_KINDS:
        check_no_session_running(instrument, performed_at)
    if pump is not None and performed_at.date() < pump.installed_on:
        raise Invalid(
            f"Pump {pump.name!r} was installed on {pump.installed_on}, after that date.",
            fields={"performed_at": ["Before the pump was installed."]},
        )
    money = None
    if cost is not None and cost != "":
        money = clean_amount(cost, "cost", places="0.01", positive=False)
    return part, money


def check_reading(
    *,
    instrument: Instrument,
    counter: str,
    pump: Pump | None,
    read_at: dt.datetime,
    now: dt.datetime,
) -> None:
    check_choice(counter, Counter, "counter")
    if counter not in METERED_COUNTERS:
        raise Invalid(
            "Vent cycles come from the logbook; only hour meters are read.",
            fields={"counter": ["Not an hour meter."]},
        )
    check_pump(instrument, pump, needed=counter == Counter.PUMP_HOURS, what="pump-hours reading")
    if counter == Counter.EMITTER_HOURS:
        check_has_emitter(instrument)
    check_not_future(read_at, now, "read_at")


def check_limit(
    *, instrument: Instrument, counter: str, pump: Pump | None, part: str, warn_percent: int
) -> str:
    """Validate a limit's identity and warn level; returns the cleaned part name."""
    check_choice(counter, Counter, "counter")
    what = f"{Counter(counter).label.lower()} limit"
    check_pump(instrument, pump, needed=counter == Counter.PUMP_HOURS, what=what)
    part = clean_part(part, needed=counter == Counter.VENT_CYCLES, what=what)
    if counter == Counter.EMITTER_HOURS:
        check_has_emitter(instrument)
    if not isinstance(warn_percent, int) or not 1 <= warn_percent <= 100:
        raise Invalid(
            "Warn at a whole percentage from 1 to 100.", fields={"warn_percent": ["1–100."]}
        )
    return part
