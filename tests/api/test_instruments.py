"""Instruments: state now, and busy times that name no one."""

from __future__ import annotations

import datetime as dt

from tests import factories as f
from tests.api.conftest import NOW


def test_state_of_each_instrument(world):
    fa = world.facility
    f.BookingFactory(
        instrument=world.free,
        user=fa.client,
        account=fa.client_account,
        starts_at=NOW - dt.timedelta(minutes=30),
    )
    f.InstrumentFactory(code="old-tem", name="Old TEM", out_of_service=True)
    listed = world.client_for("researcher_b").get("/api/v1/instruments/").json()["results"]
    states = {i["code"]: i["state"] for i in listed}
    assert states == {
        "fe-sem": "in_session",  # A's open session
        "vp-sem": "in_session",
        "tabletop": "booked",  # the client's booking covers now
        "old-tem": "out_of_service",
    }
    assert "cyd" not in str(listed) and "ada" not in str(listed)
    assert [i["code"] for i in listed] == sorted(states)  # the catalogue is ordered by code


def test_busy_times(world):
    fa = world.facility
    f.BookingFactory(
        instrument=fa.sem,
        user=fa.researcher_b,
        account=fa.account_b,
        starts_at=NOW + dt.timedelta(days=2),
    )
    api = world.client_for("researcher_a")
    start, end = NOW.isoformat(), (NOW + dt.timedelta(days=14)).isoformat()
    answer = api.get("/api/v1/instruments/fe-sem/busy/", {"window_start": start, "window_end": end})
    slots = answer.json()
    assert [s["mine"] for s in slots] == [False, True]  # B's slot first, then A's own booking
    assert set(slots[0]) == {"starts_at", "ends_at", "mine"}
    reversed_window = api.get(
        "/api/v1/instruments/fe-sem/busy/", {"window_start": end, "window_end": start}
    )
    assert reversed_window.status_code == 400
    too_long = api.get(
        "/api/v1/instruments/fe-sem/busy/",
        {"window_start": start, "window_end": (NOW + dt.timedelta(days=200)).isoformat()},
    )
    assert too_long.status_code == 400


def test_bookings_by_instrument_and_window(world):
    api = world.client_for("researcher_a")
    inside = {
        "instrument": "fe-sem",
        "window_start": (NOW + dt.timedelta(days=7, hours=1)).isoformat(),
        "window_end": (NOW + dt.timedelta(days=7, hours=1, minutes=5)).isoformat(),
    }
    assert [b["id"] for b in api.get("/api/v1/bookings/", inside).json()["results"]] == [
        world.a.booking.pk
    ]
    # Half-open: a window that starts when the booking ends does not overlap it.
    after = {**inside, "window_start": (NOW + dt.timedelta(days=7, hours=2)).isoformat()}
    after["window_end"] = (NOW + dt.timedelta(days=8)).isoformat()
    assert api.get("/api/v1/bookings/", after).json()["results"] == []
