"""Public holidays from an iCalendar file (RFC 5545), e.g. a regional holiday calendar.

Each all-day VEVENT is a holiday; an event spanning days (DTEND is exclusive for dates, RFC 5545
§3.6.1) gives one holiday per day. Events with a time of day are not holidays and are skipped.
Pure parsing: services.add_holiday writes the result.
"""

from __future__ import annotations

import datetime as dt

import icalendar


def holidays_from_ics(data: bytes | str) -> list[tuple[dt.date, str]]:
    """(day, name) for every day of every all-day event, sorted by day."""
    try:
        calendar = icalendar.Calendar.from_ical(data)
    except ValueError as exc:
        raise ValueError(f"not an iCalendar file: {exc}") from None
    days: dict[dt.date, str] = {}
    for event in calendar.walk("VEVENT"):
        start = event.get("DTSTART")
        if start is None:
            continue
        first = start.dt
        if isinstance(first, dt.datetime):
            continue  # a timed event, not a whole day off
        end = event.get("DTEND")
        last = end.dt - dt.timedelta(days=1) if end is not None else first
        name = str(event.get("SUMMARY", "Holiday")).strip() or "Holiday"
        day = first
        while day <= max(first, last):
            days.setdefault(day, name)
            day += dt.timedelta(days=1)
    return sorted(days.items())
