"""Upkeep fixtures: a frozen clock in UTC and helpers that write logbook sessions directly.

Sessions are made with the factory (not check-in/out) so each test states exact start, length,
beam-on hours and vents, and the arithmetic in its comments can be followed by hand.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
import time_machine

from facility.instruments.models import EmitterType
from tests import factories as f

UTC = dt.UTC
# A Monday morning; all test times are offsets from it.
T0 = dt.datetime(2025, 3, 3, 0, 0, tzinfo=UTC)


def at(days: float = 0, hours: float = 0) -> dt.datetime:
    return T0 + dt.timedelta(days=days, hours=hours)


@pytest.fixture(autouse=True)
def _utc(settings):
    # UTC keeps "midnight of the installation day" and calendar hours free of DST shifts.
    settings.TIME_ZONE = "UTC"


@pytest.fixture
def clock():
    with time_machine.travel(at(60), tick=False) as traveller:
        yield traveller


@pytest.fixture
def lab6(facility):
    return f.InstrumentFactory(code="lab6-sem", name="LaB6 SEM", emitter_type=EmitterType.LAB6)


def add_session(
    facility,
    instrument,
    start: dt.datetime,
    hours: float,
    *,
    beam: float | None = None,
    vents: int = 0,
):
    """A closed session of `hours` length; beam-on hours default to the whole session."""
    return f.InstrumentSessionFactory(
        instrument=instrument,
        operator=facility.researcher_a,
        account=facility.account_a,
        started_at=start,
        ended_at=start + dt.timedelta(hours=hours),
        beam_on_hours=Decimal(str(hours if beam is None else beam)),
        vent_cycles=vents,
    )
