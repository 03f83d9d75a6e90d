"""Reads on upkeep: who may see it, lists per instrument, counters and their reconciliation.

Upkeep is staff business: service costs, meter drift and the audit trail are not shown to
researchers. Every page, endpoint and export goes through `visible_to` / `may_view`.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import QuerySet

from facility.errors import NotAllowed
from facility.instruments.models import Instrument, Pump
from facility.people.queries import is_staff
from facility.upkeep.counters import (
    CounterSpec,
    ReadingCheck,
    Timeline,
    UpkeepRecords,
    counter_specs,
)
from facility.upkeep.models import Alert, Limit, MeterReading, ServiceEvent
from facility.upkeep.status import (
    CounterStatus,
    counter_status,
    facility_status,
    instrument_status,
)

__all__ = [
    "CounterSpec",
    "CounterStatus",
    "counter_specs",
    "counter_status",
    "facility_status",
    "instrument_status",
    "known_counter_status",
    "limits_of",
    "may_view",
    "meter_readings",
    "open_alerts",
    "reconciliation",
    "service_events",
    "spec_for",
    "visible_to",
]


def may_view(user: AbstractBaseUser | None) -> None:
    """Raise NotAllowed unless `user` is facility staff."""
    if not is_staff(user):
        raise NotAllowed("Upkeep records are for facility staff.")


def visible_to(user: AbstractBaseUser | None) -> QuerySet[ServiceEvent]:
    """Service events the person may see: staff all, everyone else none."""
    if is_staff(user):
        return ServiceEvent.objects.all()
    return ServiceEvent.objects.none()


def _in_range(
    qs: QuerySet, field: str, start: dt.datetime | None, end: dt.datetime | None
) -> QuerySet:
    if start is not None:
        qs = qs.filter(**{f"{field}__gte": start})
    if end is not None:
        qs = qs.filter(**{f"{field}__lt": end})
    return qs


def service_events(
    instrument: Instrument, *, start: dt.datetime | None = None, end: dt.datetime | None = None
) -> QuerySet[ServiceEvent]:
    """An instrument's service events in [start, end), oldest first."""
    qs = ServiceEvent.objects.filter(instrument=instrument).select_related("pump", "recorded_by")
    return _in_range(qs, "performed_at", start, end).order_by("performed_at", "pk")


def meter_readings(
    instrument: Instrument, *, start: dt.datetime | None = None, end: dt.datetime | None = None
) -> QuerySet[MeterReading]:
    qs = MeterReading.objects.filter(instrument=instrument).select_related("pump", "recorded_by")
    return _in_range(qs, "read_at", start, end).order_by("read_at", "pk")


def limits_of(instrument: Instrument) -> QuerySet[Limit]:
    return Limit.objects.filter(instrument=instrument).select_related("pump", "set_by")


def open_alerts(instrument: Instrument | None = None) -> QuerySet[Alert]:
    """Alerts for the staff dashboard: not acknowledged, part not yet changed."""
    qs = Alert.objects.filter(resolved_at__isnull=True, acknowledged_at__isnull=True)
    if instrument is not None:
        qs = qs.filter(instrument=instrument)
    return qs.select_related("instrument", "pump").order_by("-raised_at")


def spec_for(
    instrument: Instrument, counter: str, *, pump: Pump | None = None, part: str = ""
) -> CounterSpec:
    """The counter named by (instrument, counter, pump, part), as scripts and the API name it."""
    return CounterSpec(instrument, counter, pump=pump, part=part)


def reconciliation(spec: CounterSpec) -> list[ReadingCheck]:
    """Each meter reading of the counter beside the logbook's prediction: the drift per reading."""
    return Timeline(spec).checked_readings()


def known_counter_status(spec: CounterSpec) -> CounterStatus | None:
    """The counter's status if its instrument has that counter (else None), from one read of the
    instrument's records for both the check and the figures."""
    records = UpkeepRecords([spec.instrument])
    if spec.key not in {s.key for s in counter_specs(spec.instrument, records)}:
        return None
    return counter_status(spec, records=records)
