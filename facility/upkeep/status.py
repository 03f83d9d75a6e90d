"""Each counter against its limit: hours used, share of the rating, recent rates and the forecast."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import Any

from django.utils import timezone

from facility.instruments.models import Instrument
from facility.upkeep import forecast as fc
from facility.upkeep.counters import (
    Anchor,
    CounterSpec,
    ReadingCheck,
    Timeline,
    UpkeepRecords,
    counter_specs,
)
from facility.upkeep.defaults import (
    CALENDAR,
    DEFAULT_SOURCE,
    DEFAULT_WARN_PERCENT,
    emitter_default,
)
from facility.upkeep.models import Counter, Limit, ServiceEvent


@dataclass(frozen=True)
class LimitInfo:
    """The rating in force: the facility's own `Limit`, or the default for the emitter type."""

    rated: float | None
    warn_percent: int
    is_default: bool
    source: str
    limit: Limit | None = None

    @property
    def warn_at(self) -> float | None:
        return None if self.rated is None else self.rated * self.warn_percent / 100


def limit_info(spec: CounterSpec, limit: Limit | None) -> LimitInfo:
    if limit is not None:
        return LimitInfo(
            float(limit.rated),
            limit.warn_percent,
            False,
            limit.note or "set by the facility",
            limit,
        )
    if spec.counter == Counter.EMITTER_HOURS:
        default = emitter_default(spec.instrument.emitter_type)
        if default is not None and default.rated_hours is not None:
            return LimitInfo(
                default.rated_hours,
                DEFAULT_WARN_PERCENT,
                True,
                f"{DEFAULT_SOURCE}: {default.note}",
            )
    return LimitInfo(None, DEFAULT_WARN_PERCENT, True, "no rating set")


class State:
    OK = "ok"
    WARN = "warn"
    OVER = "over"
    UNRATED = "unrated"


@dataclass(frozen=True)
class CounterStatus:
    spec: CounterSpec
    now: dt.datetime
    value: float
    derived_value: float
    anchor: Anchor
    since: dt.datetime | None
    since_event: ServiceEvent | None
    since_known: bool
    readings: list[ReadingCheck]
    limit: LimitInfo
    rates: dict[int, float | None]
    forecast: fc.Forecast | None
    timeline: Timeline = field(repr=False, compare=False)

    @property
    def drift(self) -> float:
        """Reconciled minus purely derived value: what the meter readings corrected."""
        return self.value - self.derived_value

    @property
    def share(self) -> float | None:
        return None if self.limit.rated is None else self.value / self.limit.rated

    @property
    def state(self) -> str:
        rated, warn_at = self.limit.rated, self.limit.warn_at
        if rated is None or warn_at is None:
            return State.UNRATED
        if self.value >= rated:
            return State.OVER
        if self.value >= warn_at:
            return State.WARN
        return State.OK

    @property
    def cycle(self) -> str:
        """Names the current part's life: a new emitter or a serviced pump is a new cycle."""
        return f"se{self.since_event.pk}" if self.since_event else "origin"

    @property
    def latest_reading(self) -> ReadingCheck | None:
        return self.readings[-1] if self.readings else None

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-ready values, for the API and the staff dashboard."""
        spec, info, fcst = self.spec, self.limit, self.forecast
        tz = timezone.get_current_timezone()

        def when(t: dt.datetime | None) -> str | None:
            return None if t is None else t.astimezone(tz).isoformat()

        reading = self.latest_reading
        return {
            "key": spec.key,
            "instrument": spec.instrument.code,
            "counter": spec.counter,
            "pump": spec.pump.pk if spec.pump else None,
            "part": spec.part,
            "label": spec.label,
            "basis": spec.basis,
            "unit": spec.unit,
            "value": round(self.value, 2),
            "derived_value": round(self.derived_value, 2),
            "drift": round(self.drift, 2),
            "since": when(self.since),
            "since_known": self.since_known,
            "rated": info.rated,
            "rated_is_default": info.is_default,
            "rating_source": info.source,
            "warn_percent": info.warn_percent,
            "share": None if self.share is None else round(self.share, 4),
            "state": self.state,
            "rate_per_week": {
                str(w): None if r is None else round(r, 3) for w, r in self.rates.items()
            },
            "forecast": None
            if fcst is None
            else {
                "reached": fcst.reached,
                "at_rate": {str(w): when(d) for w, d in fcst.dates.items()},
                "earliest": when(fcst.earliest),
                "latest": when(fcst.latest),
                "central": when(fcst.central),
                "plus_minus_days": None
                if fcst.plus_minus is None
                else round(fcst.plus_minus / dt.timedelta(days=1), 1),
                "text": fcst.describe(tz),
            },
            "latest_reading": None
            if reading is None
            else {
                "read_at": when(reading.reading.read_at),
                "value": reading.value,
                "logbook": round(reading.predicted, 2),
                "drift": round(reading.drift, 2),
            },
        }


def recent_rates(
    timeline: Timeline, now: dt.datetime, windows: tuple[int, ...] = fc.WINDOWS_WEEKS
) -> dict[int, float | None]:
    """Use per week over each trailing window, ignoring resets and readings: the instrument's
    pace is what wears the new part too. A window longer than the data is cut to the data."""
    spec = timeline.spec
    data_start = timeline.since(now) if spec.basis == CALENDAR else timeline.first_session
    rates: dict[int, float | None] = {}
    for weeks in windows:
        if data_start is None:
            rates[weeks] = None
            continue
        start = max(now - dt.timedelta(weeks=weeks), data_start)
        used = timeline.use(start, now)
        rates[weeks] = fc.rate_per_week(used, now - start)
    return rates


def counter_status(
    spec: CounterSpec, *, now: dt.datetime | None = None, records: UpkeepRecords | None = None
) -> CounterStatus:
    """The full picture of one counter at `now` (default: the present)."""
    return _status(spec, now or timezone.now(), records or UpkeepRecords([spec.instrument]))


def _status(spec: CounterSpec, now: dt.datetime, records: UpkeepRecords) -> CounterStatus:
    limits = records.limits.get(spec.instrument.pk, [])
    info = limit_info(spec, next((lim for lim in limits if spec.rated_by(lim)), None))
    timeline = Timeline(spec, records)
    value = timeline.value_at(now)
    rates = recent_rates(timeline, now)
    forecast = (
        fc.forecast(used=value, rated=info.rated, rates=rates, now=now) if info.rated else None
    )
    return CounterStatus(
        spec=spec,
        now=now,
        value=value,
        derived_value=timeline.value_at(now, readings=False),
        anchor=timeline.anchor(now),
        since=timeline.since(now),
        since_event=timeline.last_reset(now),
        since_known=timeline.since_known(now),
        readings=timeline.checked_readings(),
        limit=info,
        rates=rates,
        forecast=forecast,
        timeline=timeline,
    )


def instrument_status(
    instrument: Instrument,
    *,
    now: dt.datetime | None = None,
    records: UpkeepRecords | None = None,
) -> list[CounterStatus]:
    """Every counter of one instrument, in a fixed order (emitter, pumps, wear parts)."""
    now = now or timezone.now()
    records = records or UpkeepRecords([instrument])
    return [_status(s, now, records) for s in counter_specs(instrument, records)]


def facility_status(
    instruments: list[Instrument], *, now: dt.datetime | None = None
) -> list[tuple[Instrument, list[CounterStatus]]]:
    """Every counter of each of `instruments`, in their order, from one read of the records."""
    now = now or timezone.now()
    records = UpkeepRecords(instruments)
    return [(i, instrument_status(i, now=now, records=records)) for i in instruments]
