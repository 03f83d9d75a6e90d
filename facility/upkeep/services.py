"""Writes on upkeep: service events, meter readings, limits, and the daily limit check.

Staff only. Every write names its author in the change history (django-simple-history reads
`_history_user` from the instance).
"""

from __future__ import annotations

import datetime as dt
import logging
from decimal import Decimal

from django.conf import settings
from django.contrib.auth.models import AbstractBaseUser
from django.db import IntegrityError, transaction
from django.urls import reverse
from django.utils import timezone

from facility.errors import Conflict, Invalid
from facility.instruments.models import Instrument, Pump
from facility.people.services import notify_staff
from facility.upkeep import rules
from facility.upkeep.counters import CounterSpec
from facility.upkeep.models import (
    ALERT_ORDER,
    Alert,
    AlertLevel,
    Counter,
    Limit,
    MeterReading,
    ServiceEvent,
    ServiceKind,
)
from facility.upkeep.status import CounterStatus, facility_status

log = logging.getLogger(__name__)

# Days ahead within which a forecast limit date alerts staff (settings may override).
DEFAULT_FORECAST_ALERT_DAYS = 30


def _spec_of_event(event: ServiceEvent) -> CounterSpec | None:
    """The counter a service event resets, if any."""
    if event.kind == ServiceKind.EMITTER_CHANGE:
        return CounterSpec(event.instrument, Counter.EMITTER_HOURS)
    if event.pump_id:
        return CounterSpec(event.instrument, Counter.PUMP_HOURS, pump=event.pump)
    if event.kind == ServiceKind.PART_REPLACEMENT:
        return CounterSpec(event.instrument, Counter.VENT_CYCLES, part=event.part)
    return None


def record_service_event(
    *,
    instrument: Instrument,
    kind: str,
    performed_at: dt.datetime,
    by: AbstractBaseUser,
    pump: Pump | None = None,
    part: str = "",
    performed_by: str = "",
    notes: str = "",
    cost: Decimal | str | float | None = None,
    now: dt.datetime | None = None,
) -> ServiceEvent:
    """Record work done on an instrument. An emitter change, pump service or replacement, or
    wear-part replacement starts that counter again from `performed_at` and closes its alerts."""
    now = now or timezone.now()
    rules.check_staff(by, "record service events")
    with transaction.atomic():
        part, money = rules.check_service_event(
            instrument=instrument,
            kind=kind,
            pump=pump,
            part=part,
            performed_at=performed_at,
            cost=cost,
            now=now,
        )
        event = ServiceEvent(
            instrument=instrument,
            kind=kind,
            pump=pump,
            part=part,
            performed_at=performed_at,
            performed_by=performed_by.strip()[:120],
            recorded_by=by,
            notes=notes,
            cost=money,
        )
        event._history_user = by  # type: ignore[attr-defined]
        event.save()
        resolve_alerts_after(event, now=now)
        return event


def resolve_alerts_after(event: ServiceEvent, *, now: dt.datetime | None = None) -> int:
    """Close the open alerts of the counter this event resets; returns how many."""
    spec = _spec_of_event(event)
    if spec is None:
        return 0
    # Every open alert of this counter was about the part's previous life.
    return Alert.objects.filter(counter_key=spec.key, resolved_at__isnull=True).update(
        resolved_at=now or timezone.now()
    )


def update_service_event(
    *,
    event: ServiceEvent,
    by: AbstractBaseUser,
    performed_by: str | None = None,
    notes: str | None = None,
    cost: Decimal | str | float | None = None,
) -> ServiceEvent:
    """Correct the description of a service event. Its kind, part and date define a counter's
    reset, so a wrong one is deleted (in the admin, with history) and recorded again."""
    rules.check_staff(by, "change service events")
    with transaction.atomic():
        event = ServiceEvent.objects.select_for_update().get(pk=event.pk)
        if performed_by is not None:
            event.performed_by = performed_by.strip()[:120]
        if notes is not None:
            event.notes = notes
        if cost is not None:
            event.cost = (
                None
                if cost == ""
                else rules.clean_amount(cost, "cost", places="0.01", positive=False)
            )
        event._history_user = by  # type: ignore[attr-defined]
        event.save(update_fields=["performed_by", "notes", "cost"])
        return event


def record_meter_reading(
    *,
    instrument: Instrument,
    counter: str,
    value: Decimal | str | float,
    read_at: dt.datetime,
    by: AbstractBaseUser,
    pump: Pump | None = None,
    note: str = "",
    now: dt.datetime | None = None,
) -> MeterReading:
    """Record what the instrument's own hour meter showed (hours on the current emitter or pump).
    From `read_at` on the reading wins over the derived counter."""
    now = now or timezone.now()
    rules.check_staff(by, "record meter readings")
    amount = rules.clean_amount(value, "value", places="0.01", positive=False)
    with transaction.atomic():
        rules.check_reading(
            instrument=instrument, counter=counter, pump=pump, read_at=read_at, now=now
        )
        reading = MeterReading(
            instrument=instrument,
            counter=counter,
            pump=pump,
            value=amount,
            read_at=read_at,
            recorded_by=by,
            note=note[:300],
        )
        reading._history_user = by  # type: ignore[attr-defined]
        try:
            with transaction.atomic():
                reading.save()
        except IntegrityError:
            raise Conflict(
                "A reading of that meter at that exact time is already recorded.",
                fields={"read_at": ["Already recorded."]},
            ) from None
        return reading


def set_limit(
    *,
    instrument: Instrument,
    counter: str,
    rated: Decimal | str | float,
    by: AbstractBaseUser,
    pump: Pump | None = None,
    part: str = "",
    warn_percent: int = 80,
    note: str = "",
) -> Limit:
    """Set (or change) the rating of one part of an instrument, replacing any default."""
    rules.check_staff(by, "set limits")
    amount = rules.clean_amount(rated, "rated", places="0.1", positive=True)
    with transaction.atomic():
        part = rules.check_limit(
            instrument=instrument,
            counter=counter,
            pump=pump,
            part=part,
            warn_percent=warn_percent,
        )
        limit = (
            Limit.objects.select_for_update()
            .filter(instrument=instrument, counter=counter, pump=pump, part=part)
            .first()
        ) or Limit(instrument=instrument, counter=counter, pump=pump, part=part)
        limit.rated = amount
        limit.warn_percent = warn_percent
        limit.note = note[:300]
        limit.set_by = by
        limit._history_user = by  # type: ignore[attr-defined]
        try:
            with transaction.atomic():
                limit.save()
        except IntegrityError:
            raise Conflict("Someone set this limit at the same moment; try again.") from None
        return limit


def remove_limit(*, limit: Limit, by: AbstractBaseUser) -> None:
    """Drop the facility's rating; the counter goes back to its default, if it has one."""
    rules.check_staff(by, "remove limits")
    with transaction.atomic():
        limit._history_user = by  # type: ignore[attr-defined]
        limit.delete()


def acknowledge_alert(
    *, alert: Alert, by: AbstractBaseUser, now: dt.datetime | None = None
) -> Alert:
    """Staff have seen the alert: it leaves the dashboard (it stays in the record)."""
    rules.check_staff(by, "acknowledge alerts")
    with transaction.atomic():
        alert = Alert.objects.select_for_update().get(pk=alert.pk)
        if alert.acknowledged_at is None:
            alert.acknowledged_at = now or timezone.now()
            alert.acknowledged_by = by
            alert.save(update_fields=["acknowledged_at", "acknowledged_by"])
        return alert


# --- the daily check ----------------------------------------------------------------------


def forecast_alert_days() -> int:
    days = getattr(settings, "UPKEEP_FORECAST_ALERT_DAYS", DEFAULT_FORECAST_ALERT_DAYS)
    if not isinstance(days, int) or days < 0:
        raise Invalid(f"UPKEEP_FORECAST_ALERT_DAYS must be a whole number of days, not {days!r}.")
    return days


def crossed_levels(status: CounterStatus, *, within_days: int) -> list[str]:
    """The thresholds this counter is past now, least urgent first."""
    rated, warn_at = status.limit.rated, status.limit.warn_at
    if rated is None or warn_at is None:
        return []
    levels = []
    forecast = status.forecast
    soon = status.now + dt.timedelta(days=within_days)
    if (
        forecast is not None
        and not forecast.reached
        and forecast.earliest is not None
        and forecast.earliest <= soon
    ):
        levels.append(AlertLevel.FORECAST)
    if status.value >= warn_at:
        levels.append(AlertLevel.WARN)
    if status.value >= rated:
        levels.append(AlertLevel.LIMIT)
    return levels


def alert_topic(status: CounterStatus, level: str) -> str:
    """One name per crossing: the counter, the part's life since its last reset, the threshold
    and the rating — a new rating is a new threshold and may be crossed again."""
    return f"upkeep:{status.spec.key}:{status.cycle}:{level}:{status.limit.rated:g}"


def _message(status: CounterStatus, level: str) -> str:
    spec, info = status.spec, status.limit
    text = (
        f"{spec.instrument.name} — {spec.label}: {status.value:,.0f} {spec.unit} of "
        f"{info.rated:,.0f} ({status.share:.0%})"
    )
    if info.is_default:
        text += ", default rating"
    if level == AlertLevel.LIMIT:
        text += "; past its rated life"
    elif level == AlertLevel.WARN:
        text += f"; past the {info.warn_percent}% warn level"
    if status.forecast is not None and not status.forecast.reached:
        text += f"; limit {status.forecast.describe(timezone.get_current_timezone())}"
    return text[:300]


def _body(status: CounterStatus) -> str:
    lines = [
        f"Counting since {status.since:%Y-%m-%d %H:%M}" if status.since else "No start known",
        f"Rating: {status.limit.rated:g} {status.spec.unit} ({status.limit.source})",
        f"Warn at {status.limit.warn_percent}%",
    ]
    for weeks, rate in status.rates.items():
        if rate is not None:
            lines.append(f"Rate over {weeks} weeks: {rate:.1f} {status.spec.unit}/week")
    if status.latest_reading is not None:
        lines.append(f"Latest meter reading drift: {status.latest_reading.drift:+.1f} h")
    return "\n".join(lines)


def _crossings(status: CounterStatus, *, within_days: int) -> dict[str, str]:
    """The alert topic of each threshold the counter is past, by level."""
    levels = crossed_levels(status, within_days=within_days)
    return {level: alert_topic(status, level) for level in levels}


def _raise_alerts(
    status: CounterStatus, *, within_days: int, now: dt.datetime, known: set[str]
) -> list[Alert]:
    """Alert the counter's crossings whose topic is not in `known` (alerted before)."""
    topics = {
        level: topic
        for level, topic in _crossings(status, within_days=within_days).items()
        if topic not in known
    }
    if not topics:
        return []
    with transaction.atomic():
        created: list[Alert] = []
        for level, topic in topics.items():
            forecast = status.forecast
            # get_or_create, not create: a run alongside may have raised it since `known` was read.
            alert, made = Alert.objects.get_or_create(
                topic=topic,
                defaults={
                    "counter_key": status.spec.key,
                    "instrument": status.spec.instrument,
                    "counter": status.spec.counter,
                    "pump": status.spec.pump,
                    "part": status.spec.part,
                    "level": level,
                    "value": status.value,
                    "rated": status.limit.rated,
                    "forecast_on": forecast.earliest.date()
                    if forecast and forecast.earliest
                    else None,
                    "message": _message(status, level),
                    "raised_at": now,
                },
            )
            if made:
                created.append(alert)
        if created:
            # Crossing two thresholds at once (a rating lowered, a first check on old data)
            # sends one message, about the more urgent.
            top = max(created, key=lambda a: ALERT_ORDER[a.level])
            notify_staff(
                subject=top.message[:200],
                body=_body(status),
                link=reverse("admin:upkeep_alert_change", args=[top.pk]),
                topic=top.topic,
            )
    return created


def check_limits(*, now: dt.datetime | None = None, within_days: int | None = None) -> list[Alert]:
    """Compare every counter of every active instrument with its limit; alert staff (e-mail and
    in-app) once per threshold crossing. Safe to run any number of times a day."""
    now = now or timezone.now()
    within = forecast_alert_days() if within_days is None else within_days
    raised: list[Alert] = []
    instruments = list(Instrument.objects.filter(is_active=True).order_by("pk"))
    statuses = [s for _, of_one in facility_status(instruments, now=now) for s in of_one]
    # One look for the crossings alerted on an earlier run, not one per counter.
    topics = [t for s in statuses for t in _crossings(s, within_days=within).values()]
    known = set(Alert.objects.filter(topic__in=topics).values_list("topic", flat=True))
    for status in statuses:
        raised.extend(_raise_alerts(status, within_days=within, now=now, known=known))
    if raised:
        log.info("upkeep: raised %d alert(s)", len(raised))
    return raised
