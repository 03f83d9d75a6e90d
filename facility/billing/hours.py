"""The facility calendar: which time is normal hours and which is out of hours. Pure Python.

Normal hours are a daily window (e.g. 08:00–18:00) on the instrument's normal weekdays, in the
facility's local time zone, except on public holidays. Everything else — evenings, nights,
weekends, holidays — is out of hours. Windows are built in local wall-clock time and compared in
absolute time, so a daylight-saving change moves neither the window nor the length of an hour.
"""

from __future__ import annotations

import datetime as dt
import functools
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from facility.instruments.models import Instrument

_DAY = dt.timedelta(days=1)


@dataclass(frozen=True)
class TimeSplit:
    """How much of an interval falls in normal hours and out of hours (exact, absolute time)."""

    normal: dt.timedelta
    out_of_hours: dt.timedelta
    ends_out_of_hours: bool

    @property
    def total(self) -> dt.timedelta:
        return self.normal + self.out_of_hours


@dataclass(frozen=True)
class FacilityCalendar:
    tz: dt.tzinfo
    opens: dt.time
    closes: dt.time
    weekdays: frozenset[int]  # ISO weekdays, 1 = Monday
    holidays: frozenset[dt.date] = frozenset()

    @classmethod
    def for_instrument(
        cls, instrument: Instrument, *, tz: dt.tzinfo, holidays: Iterable[dt.date] = ()
    ) -> FacilityCalendar:
        return cls(
            tz=tz,
            opens=instrument.bookable_from,
            closes=instrument.bookable_until,
            weekdays=frozenset(instrument.normal_weekdays),
            holidays=frozenset(holidays),
        )

    def is_normal_day(self, day: dt.date) -> bool:
        return day.isoweekday() in self.weekdays and day not in self.holidays

    @functools.lru_cache(maxsize=4096)  # noqa: B019 — calendars are few, immutable and hashable
    def window(self, day: dt.date) -> tuple[dt.datetime, dt.datetime] | None:
        """The normal-hours window of a local day as aware UTC datetimes, or None."""
        if not self.is_normal_day(day):
            return None
        start = dt.datetime.combine(day, self.opens, tzinfo=self.tz).astimezone(dt.UTC)
        end = dt.datetime.combine(day, self.closes, tzinfo=self.tz).astimezone(dt.UTC)
        return (start, end) if end > start else None

    def windows(self, start: dt.datetime, end: dt.datetime) -> Iterator[tuple[dt.datetime, ...]]:
        """Normal-hours windows of every local day that [start, end) touches."""
        day = start.astimezone(self.tz).date() - _DAY
        last = end.astimezone(self.tz).date() + _DAY
        while day <= last:
            span = self.window(day)
            if span is not None:
                yield span
            day += _DAY

    def split(self, start: dt.datetime, end: dt.datetime) -> TimeSplit:
        """Split the half-open interval [start, end) into normal and out-of-hours time.

        Both ends must be aware. Differences are taken in UTC: Python subtracts two datetimes of
        the same ZoneInfo as wall-clock times, which would count a DST day's lost hour.
        """
        if start.tzinfo is None or end.tzinfo is None:
            raise ValueError("start and end must be aware datetimes")
        start, end = start.astimezone(dt.UTC), end.astimezone(dt.UTC)
        if end <= start:
            return TimeSplit(dt.timedelta(0), dt.timedelta(0), False)
        normal = dt.timedelta(0)
        ends_out = True
        for open_at, close_at in self.windows(start, end):
            overlap = min(end, close_at) - max(start, open_at)
            if overlap > dt.timedelta(0):
                normal += overlap
            if open_at < end <= close_at:
                ends_out = False
        return TimeSplit(normal, (end - start) - normal, ends_out)

    def normal_hours(self, first: dt.date, last: dt.date) -> dt.timedelta:
        """Total normal-hours time from local day `first` to `last` inclusive (bookable time)."""
        total = dt.timedelta(0)
        day = first
        while day <= last:
            span = self.window(day)
            if span is not None:
                total += span[1] - span[0]
            day += _DAY
        return total
