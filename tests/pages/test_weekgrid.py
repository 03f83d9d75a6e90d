"""The week calendar's layout: blocks span their slots, free slots propose an hour, DST days."""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

import pytest

from facility.bookings.weekgrid import build_week, monday_of
from tests import factories as f

pytestmark = pytest.mark.django_db
VIENNA = ZoneInfo("Europe/Vienna")


def _cells(week, kind):
    return [c for row in week.rows for c in row.cells if c.kind == kind]


def test_a_booking_is_one_block_spanning_its_slots(facility):
    monday = dt.date(2030, 3, 4)
    booking = f.BookingFactory.build(
        pk=1,
        instrument=facility.sem,
        user=facility.researcher_b,
        starts_at=dt.datetime(2030, 3, 5, 9, 15, tzinfo=VIENNA),
        ends_at=dt.datetime(2030, 3, 5, 11, 0, tzinfo=VIENNA),
    )
    week = build_week(
        instrument=facility.sem,
        monday=monday,
        bookings=[booking],
        viewer=facility.researcher_a,
        viewer_is_staff=False,
        now=dt.datetime(2030, 3, 1, 8, tzinfo=VIENNA),
        tz=VIENNA,
    )
    blocks = _cells(week, "block")
    assert len(blocks) == 1
    # 09:00 (partly taken) to 11:00: four half-hour slots.
    assert blocks[0].rowspan == 4
    assert blocks[0].text == "Booked"
    assert blocks[0].times == "09:15–11:00"
    assert len(_cells(week, "covered")) == 3
    # Normal hours 08:00–18:00: 20 rows, each with 7 cells.
    assert len(week.rows) == 20
    assert all(len(row.cells) == 7 for row in week.rows)
    free_before = next(c for c in _cells(week, "free") if c.start_param == "2030-03-05T08:30")
    assert free_before.end_param == "2030-03-05T09:15"  # shortened to the booking's start


def test_bookings_outside_normal_hours_stretch_the_grid(facility):
    late = f.BookingFactory.build(
        pk=2,
        instrument=facility.sem,
        user=facility.researcher_a,
        starts_at=dt.datetime(2030, 3, 6, 19, 0, tzinfo=VIENNA),
        ends_at=dt.datetime(2030, 3, 6, 21, 0, tzinfo=VIENNA),
    )
    week = build_week(
        instrument=facility.sem,
        monday=monday_of(dt.date(2030, 3, 6)),
        bookings=[late],
        viewer=facility.researcher_a,
        viewer_is_staff=False,
        now=dt.datetime(2030, 3, 1, 8, tzinfo=VIENNA),
        tz=VIENNA,
    )
    assert week.rows[0].label == "08:00"
    assert week.rows[-1].label == "20:30"
    block = _cells(week, "block")[0]
    assert block.mine and block.text == "Your booking" and block.out_of_hours


def test_the_day_summer_time_ends_still_lines_up(facility):
    # Europe/Vienna leaves summer time on Sunday 27 October 2030 at 03:00 (EU rule: last Sunday
    # of October, 01:00 UTC).
    monday = dt.date(2030, 10, 21)
    sunday_booking = f.BookingFactory.build(
        pk=3,
        instrument=facility.sem,
        user=facility.researcher_a,
        starts_at=dt.datetime(2030, 10, 27, 10, 0, tzinfo=VIENNA),
        ends_at=dt.datetime(2030, 10, 27, 12, 0, tzinfo=VIENNA),
    )
    week = build_week(
        instrument=facility.sem,
        monday=monday,
        bookings=[sunday_booking],
        viewer=facility.researcher_a,
        viewer_is_staff=False,
        now=dt.datetime(2030, 10, 1, 8, tzinfo=VIENNA),
        tz=VIENNA,
    )
    block = _cells(week, "block")[0]
    assert block.day == dt.date(2030, 10, 27)
    assert block.rowspan == 4  # two hours of wall-clock time, not shifted by the offset change
    assert block.start.astimezone(VIENNA).hour == 10
