"""Calendar months in the facility's time zone: parsing '2027-03', bounds, neighbours. Pure."""

from __future__ import annotations

import datetime as dt
import re
from zoneinfo import ZoneInfo

_MONTH = re.compile(r"^(\d{4})-(\d{2})$")


def parse_month(text: str) -> dt.date:
    """'2027-03' → date(2027, 3, 1); anything else raises ValueError with a readable message."""
    match = _MONTH.match(text.strip())
    if not match:
        raise ValueError(f"month {text!r} is not in the form YYYY-MM, e.g. 2027-03")
    year, month = int(match.group(1)), int(match.group(2))
    if not 1 <= month <= 12 or year < 1900:
        raise ValueError(f"month {text!r} does not exist")
    return dt.date(year, month, 1)


def first_of(day: dt.date) -> dt.date:
    return day.replace(day=1)


def next_month(month: dt.date) -> dt.date:
    return dt.date(month.year + month.month // 12, month.month % 12 + 1, 1)


def previous_month(month: dt.date) -> dt.date:
    return dt.date(month.year - (month.month == 1), (month.month - 2) % 12 + 1, 1)


def month_bounds(month: dt.date, tz: dt.tzinfo) -> tuple[dt.datetime, dt.datetime]:
    """[first moment, first moment of the next month) in `tz`, as aware UTC datetimes.

    Midnight never falls in a DST gap in the EU zones; where it might (some zones change at
    midnight) ZoneInfo's fold=0 picks the earlier offset, which keeps months contiguous.
    """
    start = dt.datetime.combine(first_of(month), dt.time.min, tzinfo=tz)
    end = dt.datetime.combine(next_month(month), dt.time.min, tzinfo=tz)
    return start.astimezone(dt.UTC), end.astimezone(dt.UTC)


def local_month_of(moment: dt.datetime, tz: dt.tzinfo) -> dt.date:
    """The month a moment belongs to in `tz` (a session over midnight belongs to its start)."""
    return first_of(moment.astimezone(tz).date())


def zone(name: str) -> ZoneInfo:
    return ZoneInfo(name)
