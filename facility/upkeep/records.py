"""What the counters of some instruments read, loaded once for all of them.

A page of counters used to ask the database per instrument, per counter and per time window. Here
one query per table serves every instrument of the page: pumps, limits, service events, meter
readings, the first logbook entry of each instrument (a GROUP BY), and — only when a counter counts
sessions at all — the closed sessions' times, beam-on hours and vents. The arithmetic on them is
in counters.py; nothing here is computed.
"""

from __future__ import annotations

import datetime as dt
from collections import defaultdict
from collections.abc import Iterable

from django.db.models import DurationField, ExpressionWrapper, F, Min, Q, Sum

from facility.instruments.models import Instrument, Pump
from facility.logbook.models import InstrumentSession
from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS
from facility.upkeep.models import Limit, MeterReading, ServiceEvent
from facility.upkeep.usage import (
    SESSION_FIELDS,
    SessionRow,
    Sessions,
    as_float,
    calendar_use,
    prorated,
)

# Above this many closed sessions on one page, windows are summed by the database.
IN_MEMORY_SESSIONS = 5_000


class UpkeepRecords:
    """The upkeep records of `instruments`, grouped by instrument id."""

    def __init__(self, instruments: Iterable[Instrument]) -> None:
        self.instruments = {i.pk: i for i in instruments}
        ids = list(self.instruments)
        self.pumps: dict[int, list[Pump]] = defaultdict(list)
        # The pumps' own ordering (instrument, then name), as `instrument.pumps.all()` gives.
        for pump in Pump.objects.filter(instrument_id__in=ids):
            pump.instrument = self.instruments[pump.instrument_id]  # no query when read back
            self.pumps[pump.instrument_id].append(pump)
        self.limits: dict[int, list[Limit]] = defaultdict(list)
        for limit in Limit.objects.filter(instrument_id__in=ids):
            self.limits[limit.instrument_id].append(limit)
        self.events: dict[int, list[ServiceEvent]] = defaultdict(list)
        for event in ServiceEvent.objects.filter(instrument_id__in=ids).order_by(
            "performed_at", "pk"
        ):
            self.events[event.instrument_id].append(event)
        self.readings: dict[int, list[MeterReading]] = defaultdict(list)
        # The audit lists who recorded each reading.
        for reading in (
            MeterReading.objects.filter(instrument_id__in=ids)
            .select_related("recorded_by")
            .order_by("read_at", "pk")
        ):
            self.readings[reading.instrument_id].append(reading)
        # Open sessions count here: the counter of a new instrument starts at its first entry.
        self.first_session: dict[int, dt.datetime] = dict(
            InstrumentSession.objects.filter(instrument_id__in=ids)
            .order_by()
            .values("instrument_id")
            .annotate(first=Min("started_at"))
            .values_list("instrument_id", "first")
        )
        self._sessions: dict[int, Sessions] | None = None

    def require(self, instrument: Instrument) -> None:
        """A counter of an instrument not loaded here would read as unused: refuse it."""
        if instrument.pk not in self.instruments:
            raise ValueError(f"upkeep records of {instrument.code} were not loaded")

    def sessions(self, instrument_id: int) -> Sessions | StoredSessions:
        """The instrument's closed sessions. Read for every instrument here at the first ask, so
        a page whose counters all run on calendar time reads none. Past IN_MEMORY_SESSIONS the
        database sums each window instead: reading 100 000 sessions into Python took 1.5 s,
        about 50 windowed sums 0.3 s."""
        if self._sessions is None:
            closed = InstrumentSession.objects.filter(
                instrument_id__in=list(self.instruments), ended_at__isnull=False
            )
            if closed.count() > IN_MEMORY_SESSIONS:
                self._sessions = {pk: StoredSessions(pk) for pk in self.instruments}
                return self._sessions[instrument_id]
            grouped: dict[int, list[SessionRow]] = defaultdict(list)
            rows = closed.order_by("instrument_id", "started_at", "pk").values_list(
                "instrument_id", *SESSION_FIELDS
            )
            for instrument_id_, *row in rows:
                grouped[instrument_id_].append(tuple(row))  # type: ignore[arg-type]
            self._sessions = {pk: Sessions(grouped[pk]) for pk in self.instruments}
        return self._sessions[instrument_id]


_CHAMBER_TIME = ExpressionWrapper(F("ended_at") - F("started_at"), output_field=DurationField())


class StoredSessions:
    """The interface of `usage.Sessions`, answered by the database window by window: sessions
    wholly inside a window are summed there, the few that cross a boundary are prorated here."""

    def __init__(self, instrument_id: int) -> None:
        self.closed = InstrumentSession.objects.filter(
            instrument_id=instrument_id, ended_at__isnull=False
        ).order_by()

    def use(self, basis: str, start: dt.datetime | None, end: dt.datetime) -> float:
        """Use accumulated from `start` (None: since the beginning) to `end`, in hours or vents."""
        if basis == CALENDAR:
            return calendar_use(start, end)
        if start is not None and end <= start:
            return 0.0
        closed = self.closed.filter(started_at__lt=end)
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
        return as_float(total) + prorated(edges, basis, start, end)

    def between(self, after: dt.datetime, before: dt.datetime) -> list[SessionRow]:
        """Sessions ending after `after` and starting before `before`, by start."""
        return list(
            self.closed.filter(ended_at__gt=after, started_at__lt=before)
            .order_by("started_at", "pk")
            .values_list(*SESSION_FIELDS)
        )
