"""Derived counters: emitter hours, pump hours and vent cycles, read from the logbook.

Nothing here is stored. A counter's value at time t is

    value(t) = anchor value + use between the anchor and t,

where the anchor is the latest of: the part's last reset (emitter change, pump service or
replacement, wear-part replacement: value 0), a meter reading taken since that reset (the reading's
value: the reading wins from its date on), or the counter's origin (pump installation, else the
instrument's first logbook session: value 0). Use between two times is a database aggregate over
the closed sessions in between (Sum of beam-on hours, of session lengths, of vent cycles) or plain
calendar time for parts that run continuously (pumps marked so, and Schottky emitters, which are
kept hot day and night: see defaults.py). Chart series read the sessions once and apply the same
arithmetic in Python (`Cumulative`); the tests check the two agree.

A session that straddles a boundary contributes in proportion to its overlap: its beam-on hours and
vents are taken as spread evenly over it, since the logbook knows no finer. Open sessions count
once they are checked out, when their beam-on hours become known.
"""

from __future__ import annotations

import bisect
import datetime as dt
from collections.abc import Iterable
from dataclasses import dataclass
from decimal import Decimal

from django.db.models import DurationField, ExpressionWrapper, F, Min, Q, QuerySet, Sum
from django.utils import timezone

from facility.instruments.models import Instrument, Pump
from facility.logbook.models import InstrumentSession
from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS, emitter_basis
from facility.upkeep.models import (
    PUMP_KINDS,
    Counter,
    Limit,
    MeterReading,
    ServiceEvent,
    ServiceKind,
)

HOUR = dt.timedelta(hours=1)


def start_of_day(day: dt.date) -> dt.datetime:
    """Midnight at the start of `day` in the facility's time zone."""
    return timezone.make_aware(dt.datetime.combine(day, dt.time.min))


@dataclass(frozen=True)
class CounterSpec:
    """Which counter: an instrument's emitter, one of its pumps, or a wear part counted in vents."""

    instrument: Instrument
    counter: str
    pump: Pump | None = None
    part: str = ""

    @property
    def key(self) -> str:
        """Stable name of the counter, used in alert topics and file names."""
        tail = f":pump-{self.pump.pk}" if self.pump else (f":{self.part}" if self.part else "")
        return f"{self.instrument.code}:{self.counter}{tail}"

    @property
    def basis(self) -> str:
        if self.counter == Counter.EMITTER_HOURS:
            return emitter_basis(self.instrument.emitter_type)
        if self.counter == Counter.PUMP_HOURS:
            assert self.pump is not None
            return CALENDAR if self.pump.runs_continuously else CHAMBER
        return VENTS

    @property
    def unit(self) -> str:
        return "cycles" if self.counter == Counter.VENT_CYCLES else "h"

    @property
    def label(self) -> str:
        if self.counter == Counter.EMITTER_HOURS:
            return f"Emitter ({self.instrument.get_emitter_type_display()})"
        if self.counter == Counter.PUMP_HOURS:
            assert self.pump is not None
            return f"Pump: {self.pump.name} ({self.pump.get_kind_display()})"
        return f"Vent cycles: {self.part}"

    def resets(self) -> QuerySet[ServiceEvent]:
        """Service events that start this counter again."""
        events = ServiceEvent.objects.filter(instrument=self.instrument)
        if self.counter == Counter.EMITTER_HOURS:
            return events.filter(kind=ServiceKind.EMITTER_CHANGE)
        if self.counter == Counter.PUMP_HOURS:
            return events.filter(kind__in=PUMP_KINDS, pump=self.pump)
        return events.filter(kind=ServiceKind.PART_REPLACEMENT, part=self.part)

    def readings(self) -> QuerySet[MeterReading]:
        if self.counter == Counter.VENT_CYCLES:
            return MeterReading.objects.none()
        return MeterReading.objects.filter(
            instrument=self.instrument, counter=self.counter, pump=self.pump
        )

    def limit_filter(self) -> Q:
        return Q(instrument=self.instrument, counter=self.counter, pump=self.pump, part=self.part)


def counter_specs(instrument: Instrument) -> list[CounterSpec]:
    """Every counter the instrument has: its emitter, each pump, each wear part with a limit or a
    recorded replacement."""
    specs: list[CounterSpec] = []
    if instrument.emitter_type != "none":
        specs.append(CounterSpec(instrument, Counter.EMITTER_HOURS))
    specs.extend(
        CounterSpec(instrument, Counter.PUMP_HOURS, pump=pump) for pump in instrument.pumps.all()
    )
    parts = set(
        Limit.objects.filter(instrument=instrument, counter=Counter.VENT_CYCLES).values_list(
            "part", flat=True
        )
    ) | set(
        ServiceEvent.objects.filter(
            instrument=instrument, kind=ServiceKind.PART_REPLACEMENT
        ).values_list("part", flat=True)
    )
    specs.extend(CounterSpec(instrument, Counter.VENT_CYCLES, part=p) for p in sorted(parts))
    return specs


_CHAMBER_TIME = ExpressionWrapper(F("ended_at") - F("started_at"), output_field=DurationField())


def use_between(
    instrument_id: int, basis: str, start: dt.datetime | None, end: dt.datetime
) -> float:
    """Use accumulated from `start` (None: since the beginning) to `end`, in hours or vents.

    Sessions wholly inside are summed by the database; the few that cross a boundary are
    prorated by their overlap.
    """
    if basis == CALENDAR:
        if start is None or end <= start:
            return 0.0
        return (end - start) / HOUR
    if start is not None and end <= start:
        return 0.0
    closed = InstrumentSession.objects.filter(
        instrument_id=instrument_id, ended_at__isnull=False, started_at__lt=end
    )
    inside = Q(ended_at__lte=end)
    if start is not None:
        closed = closed.filter(ended_at__gt=start)
        inside &= Q(started_at__gte=start)
    if basis == BEAM_ON:
        total: object = closed.filter(inside).aggregate(t=Sum("beam_on_hours"))["t"]
    elif basis == VENTS:
        total = closed.filter(inside).aggregate(t=Sum("vent_cycles"))["t"]
    elif basis == CHAMBER:
        total = closed.filter(inside).aggregate(t=Sum(_CHAMBER_TIME))["t"]
    else:
        raise ValueError(f"unknown counting basis {basis!r}")
    edges = closed.exclude(inside).values_list(*SESSION_FIELDS)
    return _as_float(total) + prorated(edges, basis, start, end)


# What `prorated` reads of a session, in this order.
SESSION_FIELDS = ("started_at", "ended_at", "beam_on_hours", "vent_cycles")
SessionRow = tuple[dt.datetime, dt.datetime, Decimal | None, int]


def prorated(
    rows: Iterable[SessionRow], basis: str, start: dt.datetime | None, end: dt.datetime
) -> float:
    """Use from closed sessions between `start` and `end`, each counted for the share of it
    that falls inside (beam-on hours and vents taken as spread evenly over the session)."""
    amount = 0.0
    for started, ended, beam, vents in rows:
        lo = started if start is None else max(started, start)
        overlap = min(ended, end) - lo
        if overlap <= dt.timedelta(0):
            continue
        share = overlap / (ended - started)
        if basis == BEAM_ON:
            amount += float(beam or 0) * share
        elif basis == VENTS:
            amount += vents * share
        else:
            amount += overlap / HOUR
    return amount


def _as_float(total: object) -> float:
    if total is None:
        return 0.0
    if isinstance(total, dt.timedelta):
        return total / HOUR
    if isinstance(total, Decimal | int | float):
        return float(total)
    raise TypeError(f"unexpected aggregate {total!r}")


def first_session_start(instrument_id: int) -> dt.datetime | None:
    return InstrumentSession.objects.filter(instrument_id=instrument_id).aggregate(
        m=Min("started_at")
    )["m"]


@dataclass(frozen=True)
class Anchor:
    """Where the counter's current value is counted from."""

    at: dt.datetime | None
    value: float
    event: ServiceEvent | None = None
    reading: MeterReading | None = None

    @property
    def kind(self) -> str:
        return "reset" if self.event else ("reading" if self.reading else "origin")


@dataclass(frozen=True)
class ReadingCheck:
    """A meter reading beside what the logbook predicted at that moment."""

    reading: MeterReading
    predicted: float

    @property
    def value(self) -> float:
        return float(self.reading.value)

    @property
    def drift(self) -> float:
        """Meter minus logbook: positive when the meter counted more than the sessions show."""
        return self.value - self.predicted


class Timeline:
    """One counter's resets and readings, loaded once, to evaluate its value at any time."""

    def __init__(self, spec: CounterSpec) -> None:
        self.spec = spec
        self.resets = list(spec.resets().order_by("performed_at", "pk"))
        self.readings = list(spec.readings().order_by("read_at", "pk"))
        self.first_session = first_session_start(spec.instrument.pk)
        if spec.pump is not None:
            self.origin: dt.datetime | None = start_of_day(spec.pump.installed_on)
        else:
            self.origin = self.first_session

    def last_reset(self, at: dt.datetime) -> ServiceEvent | None:
        done = [e for e in self.resets if e.performed_at <= at]
        return done[-1] if done else None

    def anchor(
        self, at: dt.datetime, *, readings: bool = True, readings_before: dt.datetime | None = None
    ) -> Anchor:
        """The anchor in force at `at`. `readings_before` ignores readings from that time on."""
        reset = self.last_reset(at)
        since = reset.performed_at if reset else self.origin
        if readings:
            # A reading before the last reset was of the old part. One before the first logbook
            # entry is fine (the meter was read when the facility started keeping the logbook),
            # but a pump cannot have been read before it was installed.
            floor = reset.performed_at if reset else (self.origin if self.spec.pump else None)
            cutoff = readings_before
            usable = [
                r
                for r in self.readings
                if r.read_at <= at
                and (cutoff is None or r.read_at < cutoff)
                and (floor is None or r.read_at >= floor)
            ]
            if usable:
                last = usable[-1]
                return Anchor(last.read_at, float(last.value), event=reset, reading=last)
        return Anchor(since, 0.0, event=reset)

    def value_at(self, at: dt.datetime, *, readings: bool = True) -> float:
        anchor = self.anchor(at, readings=readings)
        if anchor.at is None or at < anchor.at:
            return anchor.value
        return anchor.value + use_between(self.spec.instrument.pk, self.spec.basis, anchor.at, at)

    def since(self, at: dt.datetime) -> dt.datetime | None:
        """Start of the current part's life: its last reset, else the origin."""
        reset = self.last_reset(at)
        return reset.performed_at if reset else self.origin

    def since_known(self, at: dt.datetime) -> bool:
        """False when the count starts at the first logbook entry only because nothing better is
        recorded (no reset, no installation date, no reading)."""
        anchor = self.anchor(at)
        return anchor.kind != "origin" or self.spec.pump is not None

    def checked_readings(self) -> list[ReadingCheck]:
        """Every reading with the value the logbook predicted just before it was taken."""
        checks = []
        for reading in self.readings:
            anchor = self.anchor(reading.read_at, readings_before=reading.read_at)
            predicted = anchor.value
            if anchor.at is not None and reading.read_at > anchor.at:
                predicted += use_between(
                    self.spec.instrument.pk, self.spec.basis, anchor.at, reading.read_at
                )
            checks.append(ReadingCheck(reading, predicted))
        return checks

    def series(self, points: list[dt.datetime]) -> list[tuple[dt.datetime, float]]:
        """The counter's value at each of `points` (for charts and the audit export).

        The same arithmetic as `value_at`, but the sessions are read once and prorated here:
        one query for the whole series instead of two per point.
        """
        if not points:
            return []
        anchors = [(t, self.anchor(t)) for t in points]
        if self.spec.basis == CALENDAR:
            rows: list[SessionRow] = []
        else:
            starts = [a.at for _, a in anchors if a.at is not None]
            rows = []
            if starts:
                rows = list(
                    InstrumentSession.objects.filter(
                        instrument_id=self.spec.instrument.pk,
                        ended_at__isnull=False,
                        ended_at__gt=min(starts),
                        started_at__lt=max(points),
                    )
                    .order_by("started_at")
                    .values_list(*SESSION_FIELDS)
                )
        cumulative = Cumulative(rows, self.spec.basis)
        values = []
        for t, anchor in anchors:
            if anchor.at is None or t < anchor.at:
                values.append((t, anchor.value))
            elif self.spec.basis == CALENDAR:
                values.append((t, anchor.value + (t - anchor.at) / HOUR))
            else:
                used = cumulative.at(t) - cumulative.at(anchor.at)
                values.append((t, anchor.value + used))
        return values


class Cumulative:
    """Use from the start of `rows` up to any time x, F(x), so that use between a and b is
    F(b) − F(a): prorating is additive over time. Sessions finished by x come from a prefix sum
    (bisect on end time); only those still running at x are prorated one by one."""

    def __init__(self, rows: list[SessionRow], basis: str) -> None:
        self.basis = basis
        self.rows = sorted(rows, key=lambda r: r[1])
        self.ends = [r[1] for r in self.rows]
        self.longest = max((r[1] - r[0] for r in self.rows), default=dt.timedelta(0))
        self.prefix = [0.0]
        for started, ended, beam, vents in self.rows:
            if basis == BEAM_ON:
                whole = float(beam or 0)
            elif basis == VENTS:
                whole = float(vents)
            else:
                whole = (ended - started) / HOUR
            self.prefix.append(self.prefix[-1] + whole)

    def at(self, x: dt.datetime) -> float:
        done = bisect.bisect_right(self.ends, x)
        total = self.prefix[done]
        # A session running at x ends after x but within one session length of it.
        k = done
        while k < len(self.rows) and self.ends[k] < x + self.longest:
            total += prorated([self.rows[k]], self.basis, None, x)
            k += 1
        return total
