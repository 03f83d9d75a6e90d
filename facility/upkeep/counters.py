"""Derived counters: emitter hours, pump hours and vent cycles, read from the logbook.

Nothing here is stored. A counter's value at time t is

    value(t) = anchor value + use between the anchor and t,

where the anchor is the latest of: the part's last reset (emitter change, pump service or
replacement, wear-part replacement: value 0), a meter reading taken since that reset (the reading's
value: the reading wins from its date on), or the counter's origin (pump installation, else the
instrument's first logbook session: value 0). Use between two times is the sum over the closed
sessions in between (of beam-on hours, of session lengths, of vent cycles: usage.py) or plain
calendar time for parts that run continuously (pumps marked so, and Schottky emitters, which are
kept hot day and night: see defaults.py). Chart series apply the same arithmetic as differences of
one cumulative sum (`Cumulative`); the tests check the two agree.

What the counters read — pumps, limits, service events, meter readings, sessions — comes from an
`UpkeepRecords` (records.py) loaded once for every instrument on a page, so a page costs the same
few queries however many instruments and counters it shows.

A session that straddles a boundary contributes in proportion to its overlap: its beam-on hours and
vents are taken as spread evenly over it, since the logbook knows no finer. Open sessions count
once they are checked out, when their beam-on hours become known.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from django.utils import timezone

from facility.instruments.models import Instrument, Pump
from facility.upkeep.defaults import CALENDAR, CHAMBER, VENTS, emitter_basis
from facility.upkeep.models import (
    PUMP_KINDS,
    Counter,
    Limit,
    MeterReading,
    ServiceEvent,
    ServiceKind,
)
from facility.upkeep.records import StoredSessions, UpkeepRecords
from facility.upkeep.usage import (
    HOUR,
    SESSION_FIELDS,
    Cumulative,
    SessionRow,
    calendar_use,
    prorated,
)

__all__ = [
    "HOUR",
    "SESSION_FIELDS",
    "Anchor",
    "CounterSpec",
    "Cumulative",
    "ReadingCheck",
    "SessionRow",
    "Timeline",
    "UpkeepRecords",
    "counter_specs",
    "prorated",
    "start_of_day",
    "use_between",
]


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

    def resets_with(self, event: ServiceEvent) -> bool:
        """Whether the service event starts this counter again."""
        if event.instrument_id != self.instrument.pk:
            return False
        if self.counter == Counter.EMITTER_HOURS:
            return event.kind == ServiceKind.EMITTER_CHANGE
        if self.counter == Counter.PUMP_HOURS:
            assert self.pump is not None
            return event.kind in PUMP_KINDS and event.pump_id == self.pump.pk
        return event.kind == ServiceKind.PART_REPLACEMENT and event.part == self.part

    def reads(self, reading: MeterReading) -> bool:
        """Whether the meter reading is of this counter (vent cycles have no meter)."""
        return (
            self.counter != Counter.VENT_CYCLES
            and reading.instrument_id == self.instrument.pk
            and reading.counter == self.counter
            and reading.pump_id == (self.pump.pk if self.pump else None)
        )

    def rated_by(self, limit: Limit) -> bool:
        """Whether the limit is this counter's rating."""
        return (limit.instrument_id, limit.counter, limit.pump_id, limit.part) == (
            self.instrument.pk,
            self.counter,
            self.pump.pk if self.pump else None,
            self.part,
        )


def counter_specs(
    instrument: Instrument, records: UpkeepRecords | None = None
) -> list[CounterSpec]:
    """Every counter the instrument has: its emitter, each pump, each wear part with a limit or a
    recorded replacement. `records` (loaded for this instrument among others) saves the reads."""
    records = records or UpkeepRecords([instrument])
    records.require(instrument)
    pk = instrument.pk
    specs: list[CounterSpec] = []
    if instrument.emitter_type != "none":
        specs.append(CounterSpec(instrument, Counter.EMITTER_HOURS))
    specs.extend(
        CounterSpec(instrument, Counter.PUMP_HOURS, pump=pump) for pump in records.pumps.get(pk, [])
    )
    parts = {
        limit.part for limit in records.limits.get(pk, []) if limit.counter == Counter.VENT_CYCLES
    } | {
        event.part
        for event in records.events.get(pk, [])
        if event.kind == ServiceKind.PART_REPLACEMENT
    }
    specs.extend(CounterSpec(instrument, Counter.VENT_CYCLES, part=p) for p in sorted(parts))
    return specs


def use_between(
    instrument_id: int, basis: str, start: dt.datetime | None, end: dt.datetime
) -> float:
    """Use accumulated from `start` (None: since the beginning) to `end`, in hours or vents.

    For one look from a script or a test, summed by the database; counters read the sessions
    once through their `UpkeepRecords` and measure every window from those.
    """
    return StoredSessions(instrument_id).use(basis, start, end)


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
    """One counter's resets and readings, to evaluate its value at any time.

    They come from `records`, which may hold the records of many instruments: a page of counters
    reads each table once, not once per counter (without it, this counter's instrument is read).
    """

    def __init__(self, spec: CounterSpec, records: UpkeepRecords | None = None) -> None:
        self.spec = spec
        self.records = records or UpkeepRecords([spec.instrument])
        self.records.require(spec.instrument)
        pk = spec.instrument.pk
        self.resets = [e for e in self.records.events.get(pk, []) if spec.resets_with(e)]
        self.readings = [r for r in self.records.readings.get(pk, []) if spec.reads(r)]
        self.first_session = self.records.first_session.get(pk)
        if spec.pump is not None:
            self.origin: dt.datetime | None = start_of_day(spec.pump.installed_on)
        else:
            self.origin = self.first_session

    def use(self, start: dt.datetime | None, end: dt.datetime) -> float:
        """Use from `start` to `end` on this counter's basis (calendar time reads no sessions)."""
        if self.spec.basis == CALENDAR:
            return calendar_use(start, end)
        return self.records.sessions(self.spec.instrument.pk).use(self.spec.basis, start, end)

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
        return anchor.value + self.use(anchor.at, at)

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
                predicted += self.use(anchor.at, reading.read_at)
            checks.append(ReadingCheck(reading, predicted))
        return checks

    def series(self, points: list[dt.datetime]) -> list[tuple[dt.datetime, float]]:
        """The counter's value at each of `points` (for charts and the audit export).

        The same arithmetic as `value_at`, but as differences of one cumulative sum over the
        sessions in range: a bisect per point instead of a pass over the sessions.
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
                sessions = self.records.sessions(self.spec.instrument.pk)
                rows = sessions.between(min(starts), max(points))
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
