"""Use over a window from sessions already read (usage.py), against sums worked out by hand."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest

from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS
from facility.upkeep.usage import Sessions

T0 = dt.datetime(2025, 3, 3, tzinfo=dt.UTC)


def day(d: float) -> dt.datetime:
    return T0 + dt.timedelta(days=d)


@pytest.fixture
def sessions() -> Sessions:
    # By start: a 2 h session on day 0, a 96 h one from day 1 to day 5 (a long run left going),
    # and a 1 h one on day 4 inside it.
    return Sessions(
        [
            (day(0), day(0) + dt.timedelta(hours=2), Decimal("2"), 1),
            (day(1), day(5), Decimal("48"), 4),
            (day(4), day(4) + dt.timedelta(hours=1), Decimal("1"), 2),
        ]
    )


def test_a_long_session_across_the_start_is_prorated(sessions):
    start, end = day(3), day(4.5)
    # Day 0 ended before the start: out. The long one overlaps day 3 00:00 to day 4 12:00, 36 of
    # its 96 h (0.375): 18 h beam-on, 1.5 vents, 36 h of chamber. Day 4's falls wholly inside:
    # 1 h, 2 vents. Totals 19 h, 3.5 vents, 37 h (by hand).
    assert sessions.use(BEAM_ON, start, end) == pytest.approx(19.0)
    assert sessions.use(VENTS, start, end) == pytest.approx(3.5)
    assert sessions.use(CHAMBER, start, end) == pytest.approx(37.0)


def test_since_the_beginning_and_empty_windows(sessions):
    # Everything up to day 5: 2 + 48 + 1 = 51 h beam-on, 1 + 4 + 2 = 7 vents (by hand).
    assert sessions.use(BEAM_ON, None, day(5)) == pytest.approx(51.0)
    assert sessions.use(VENTS, None, day(5)) == pytest.approx(7.0)
    # After the last session ended, and a window that closes before it opens: nothing.
    assert sessions.use(BEAM_ON, day(6), day(9)) == 0.0
    assert sessions.use(BEAM_ON, day(4), day(3)) == 0.0


def test_calendar_time_needs_no_sessions():
    # Two days of wall-clock time are 48 h; without a start there is nothing to count from.
    assert Sessions([]).use(CALENDAR, day(1), day(3)) == pytest.approx(48.0)
    assert Sessions([]).use(CALENDAR, None, day(3)) == 0.0


def test_an_unknown_basis_is_refused(sessions):
    with pytest.raises(ValueError, match="unknown counting basis"):
        sessions.use("sunlight", day(0), day(1))
