"""The week calendar of one instrument, laid out as rows of time slots by day, for the pages.

Pure layout: it takes the week's bookings (already loaded) and says, for every slot of every day,
whether it is free, past, closed, or part of a booking — and how many slots each booking spans, so
the template can draw each booking as one block. Slots are wall-clock times in the facility's zone;
comparisons with bookings are made on aware datetimes, so a daylight-saving day still lines up.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable
from dataclasses import dataclass, field

from django.contrib.auth.models import AbstractBaseUser

from facility.bookings.models import Booking, BookingState
from facility.bookings.rules import is_out_of_hours
from facility.instruments.models import Instrument

SLOT_MINUTES = 30
# A click on a free slot proposes a booking of this length (shortened to the next booking).
PROPOSED_MINUTES = 60


@dataclass
class Cell:
    day: dt.date
    start: dt.datetime
    end: dt.datetime
    kind: str  # "free", "past", "closed", "block" (first slot of a booking), "covered"
    out_of_hours: bool = False
    booking: Booking | None = None
    rowspan: int = 1
    mine: bool = False
    show_name: bool = False
    book_until: dt.datetime | None = None
    row: int = 0
    col: int = 0
    # Pre-formatted for the template (a week has hundreds of cells; filters per cell are slow).
    start_param: str = ""
    end_param: str = ""
    aria: str = ""
    times: str = ""

    @property
    def text(self) -> str:
        if self.booking is None:
            return ""
        return label_for(self.booking, mine=self.mine, show_name=self.show_name)


@dataclass
class Row:
    time: dt.time
    cells: list[Cell] = field(default_factory=list)

    @property
    def label(self) -> str:
        return f"{self.time:%H:%M}"


@dataclass
class Week:
    monday: dt.date
    days: list[dt.date]
    rows: list[Row]
    bookings: list[Booking]
    today: dt.date

    @property
    def previous(self) -> dt.date:
        return self.monday - dt.timedelta(days=7)

    @property
    def next(self) -> dt.date:
        return self.monday + dt.timedelta(days=7)

    @property
    def sunday(self) -> dt.date:
        return self.monday + dt.timedelta(days=6)


def monday_of(day: dt.date) -> dt.date:
    return day - dt.timedelta(days=day.weekday())


def week_bounds(monday: dt.date, tz: dt.tzinfo) -> tuple[dt.datetime, dt.datetime]:
    """[Monday 00:00, next Monday 00:00) in the facility's zone."""
    start = dt.datetime.combine(monday, dt.time.min, tzinfo=tz)
    end = dt.datetime.combine(monday + dt.timedelta(days=7), dt.time.min, tzinfo=tz)
    return start, end


def _slot_index(moment: dt.time, *, up: bool) -> int:
    minutes = moment.hour * 60 + moment.minute + (moment.second > 0)
    whole, part = divmod(minutes, SLOT_MINUTES)
    return whole + (1 if up and part else 0)


def _row_range(
    instrument: Instrument, bookings: Iterable[Booking], tz: dt.tzinfo, full_day: bool
) -> tuple[int, int]:
    per_day = 24 * 60 // SLOT_MINUTES
    if full_day:
        return 0, per_day
    first = _slot_index(instrument.bookable_from, up=False)
    last = _slot_index(instrument.bookable_until, up=True)
    # Stretch the window so bookings outside normal hours are still drawn.
    for booking in bookings:
        start, end = booking.starts_at.astimezone(tz), booking.ends_at.astimezone(tz)
        if start.date() != end.date():
            return 0, per_day
        first = min(first, _slot_index(start.time(), up=False))
        last = max(last, _slot_index(end.time(), up=True))
    return first, max(last, first + 1)


def build_week(
    *,
    instrument: Instrument,
    monday: dt.date,
    bookings: list[Booking],
    viewer: AbstractBaseUser,
    viewer_is_staff: bool,
    now: dt.datetime,
    tz: dt.tzinfo,
    full_day: bool = False,
) -> Week:
    """Lay out one week (Monday to Sunday) of `instrument` from its live `bookings`."""
    bookings = sorted(bookings, key=lambda b: b.starts_at)
    first, last = _row_range(instrument, bookings, tz, full_day)
    days = [monday + dt.timedelta(days=i) for i in range(7)]
    rows = [
        Row(time=(dt.datetime.min + dt.timedelta(minutes=i * SLOT_MINUTES)).time())
        for i in range(first, last)
    ]
    for col, day in enumerate(days):
        head: Cell | None = None
        midnight = dt.datetime.combine(day, dt.time.min, tzinfo=tz)
        for r, i in enumerate(range(first, last)):
            # Wall-clock arithmetic on the local day, then compared as absolute instants.
            start = (midnight + dt.timedelta(minutes=i * SLOT_MINUTES)).astimezone(dt.UTC)
            end = (midnight + dt.timedelta(minutes=(i + 1) * SLOT_MINUTES)).astimezone(dt.UTC)
            ooh = is_out_of_hours(instrument, start, end)
            holder = next((b for b in bookings if b.starts_at < end and b.ends_at > start), None)
            if holder is not None and head is not None and head.booking is holder:
                head.rowspan += 1
                cell = Cell(day=day, start=start, end=end, kind="covered", booking=holder)
            elif holder is not None:
                mine = holder.user_id == viewer.pk
                cell = Cell(
                    day=day,
                    start=start,
                    end=end,
                    kind="block",
                    out_of_hours=ooh,
                    booking=holder,
                    mine=mine,
                    show_name=viewer_is_staff,
                    times=_span(holder, tz),
                )
                head = cell
            else:
                head = None
                if start < now:
                    kind = "past"
                elif ooh and not instrument.allows_out_of_hours:
                    kind = "closed"
                else:
                    kind = "free"
                cell = Cell(day=day, start=start, end=end, kind=kind, out_of_hours=ooh)
                if kind == "free":
                    until = start + dt.timedelta(minutes=PROPOSED_MINUTES)
                    following = next((b.starts_at for b in bookings if b.starts_at >= end), None)
                    if following is not None and following < until:
                        until = following
                    cell.book_until = until
                    _describe_free(cell, tz)
            cell.row, cell.col = r, col
            rows[r].cells.append(cell)
    return Week(
        monday=monday,
        days=days,
        rows=rows,
        bookings=bookings,
        today=now.astimezone(tz).date(),
    )


def _span(booking: Booking, tz: dt.tzinfo) -> str:
    start, end = booking.starts_at.astimezone(tz), booking.ends_at.astimezone(tz)
    if start.date() != end.date():
        return f"{start:%a %H:%M}–{end:%a %H:%M}"
    return f"{start:%H:%M}–{end:%H:%M}"


def _describe_free(cell: Cell, tz: dt.tzinfo) -> None:
    start, until = cell.start.astimezone(tz), cell.book_until.astimezone(tz)
    cell.start_param = f"{start:%Y-%m-%dT%H:%M}"
    cell.end_param = f"{until:%Y-%m-%dT%H:%M}"
    cell.aria = f"Book {start:%A} {start.day} {start:%B}, {start:%H:%M} to {until:%H:%M}" + (
        " (out of hours)" if cell.out_of_hours else ""
    )


def label_for(booking: Booking, *, mine: bool, show_name: bool) -> str:
    """What a block says: never another person's name unless the viewer is staff."""
    state = " (requested)" if booking.state == BookingState.REQUESTED else ""
    if mine:
        return f"Your booking{state}"
    if show_name:
        user = booking.user
        return f"{user.get_full_name() or user.get_username()}{state}"
    return f"Booked{state}"
