"""Fixtures of the page tests: a frozen clock, signed-in clients per persona, a few sessions."""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

import pytest
import time_machine
from django.test import Client

from tests import factories as f

ZONE = ZoneInfo("Europe/Vienna")
# A Wednesday morning inside normal hours, in a zone with daylight-saving time.
NOW = dt.datetime(2030, 3, 6, 10, 7, tzinfo=ZONE)


@pytest.fixture
def frozen(settings):
    settings.TIME_ZONE = "Europe/Vienna"
    with time_machine.travel(NOW, tick=False) as traveller:
        yield traveller


@pytest.fixture
def as_user(client):
    """`as_user(person)` gives a test client signed in as that person."""

    def sign_in(user) -> Client:
        c = Client()
        c.force_login(user)
        return c

    return sign_in


def at(day: int, hour: int, minute: int = 0) -> dt.datetime:
    """A moment in March 2030, facility time."""
    return dt.datetime(2030, 3, day, hour, minute, tzinfo=ZONE)


def open_session(facility, operator=None, account=None, instrument=None, **extra):
    return f.InstrumentSessionFactory(
        instrument=instrument or facility.sem,
        operator=operator or facility.researcher_a,
        account=account or facility.account_a,
        started_at=extra.pop("started_at", NOW - dt.timedelta(minutes=40)),
        ended_at=None,
        beam_on_hours=None,
        **extra,
    )


def closed_session(facility, start: dt.datetime, hours: float, operator=None, account=None):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=operator or facility.researcher_a,
        account=account or facility.account_a,
        started_at=start,
        ended_at=start + dt.timedelta(hours=hours),
        beam_on_hours=hours,
    )
