"""Use between two times, from an instrument's closed sessions already read: plain arithmetic.

Sessions wholly inside a window are summed exactly (beam-on hours as Decimal, session lengths as
timedelta, vents as integers: what the database's Sum gave before this moved to Python); the few
that cross a boundary are prorated by their overlap, their beam-on hours and vents taken as spread
evenly over them since the logbook knows no finer. Calendar-time parts need no sessions at all.
"""

from __future__ import annotations

import bisect
import datetime as dt
from collections.abc import Iterable
from decimal import Decimal

from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS

HOUR = dt.timedelta(hours=1)

# What the counting reads of a session, in this order.
SESSION_FIELDS = ("started_at", "ended_at", "beam_on_hours", "vent_cycles")
SessionRow = tuple[dt.datetime, dt.datetime, Decimal | None, int]


def calendar_use(start: dt.datetime | None, end: dt.datetime) -> float:
    """Hours of wall-clock time from `start` to `end` (none without a start)."""
    if start is None or end <= start:
        return 0.0
    return (end - start) / HOUR


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


def as_float(total: object) -> float:
    if total is None:
        return 0.0
    if isinstance(total, dt.timedelta):
        return total / HOUR
    if isinstance(total, Decimal | int | float):
        return float(total)
    raise TypeError(f"unexpected total {total!r}")


class Sessions:
    """One instrument's closed sessions, ordered by start, to measure use over any window.

    Only the sessions that can overlap a window are visited: those starting before its end and
    at most one longest-session length before its start (bisect on the start times).
    """

    def __init__(self, rows: list[SessionRow]) -> None:
        self.rows = rows
        self.starts = [r[0] for r in rows]
        self.longest = max((r[1] - r[0] for r in rows), default=dt.timedelta(0))

    def use(self, basis: str, start: dt.datetime | None, end: dt.datetime) -> float:
        """Use accumulated from `start` (None: since the beginning) to `end`, in hours or vents."""
        if basis == CALENDAR:
            return calendar_use(start, end)
        if start is not None and end <= start:
            return 0.0
        if basis not in (BEAM_ON, VENTS, CHAMBER):
            raise ValueError(f"unknown counting basis {basis!r}")
        hi = bisect.bisect_left(self.starts, end)
        lo = 0 if start is None else bisect.bisect_right(self.starts, start - self.longest)
        beam, vents, chamber = Decimal(0), 0, dt.timedelta(0)
        edges: list[SessionRow] = []
        for row in self.rows[lo:hi]:
            started, ended, beam_on, vent_cycles = row
            if start is not None and ended <= start:
                continue
            if ended <= end and (start is None or started >= start):
                if beam_on is not None:
                    beam += beam_on
                vents += vent_cycles
                chamber += ended - started
            else:
                edges.append(row)
        total = beam if basis == BEAM_ON else (vents if basis == VENTS else chamber)
        return as_float(total) + prorated(edges, basis, start, end)

    def between(self, after: dt.datetime, before: dt.datetime) -> list[SessionRow]:
        """Sessions ending after `after` and starting before `before`, by start."""
        hi = bisect.bisect_left(self.starts, before)
        lo = bisect.bisect_right(self.starts, after - self.longest)
        return [r for r in self.rows[lo:hi] if r[1] > after]


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
