"""Upkeep through the API: staff only, the counters as upkeep computes them, writes through the
upkeep services with their refusals in the one error format, and a history row (with its
author) for every change made through the API — the upkeep issue asks for history on each change
path (service, admin, API)."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from api import tokens
from facility.instruments.models import EmitterType
from facility.upkeep import queries
from facility.upkeep.models import Alert, Limit, MeterReading, ServiceEvent
from tests import factories as f
from tests.api.conftest import NOW

BASE = "/api/v1/upkeep/instruments/lab6-sem"


@pytest.fixture
def lab6(world):
    """A LaB6 SEM with 3 h and 1.5 h of beam in two closed sessions, and one pump."""
    fa = world.facility
    instrument = f.InstrumentFactory(
        code="lab6-sem", name="LaB6 SEM", emitter_type=EmitterType.LAB6
    )
    for days, hours in ((20, 3), (10, 1.5)):
        start = NOW - dt.timedelta(days=days)
        f.InstrumentSessionFactory(
            instrument=instrument,
            operator=fa.researcher_a,
            account=fa.account_a,
            started_at=start,
            ended_at=start + dt.timedelta(hours=hours),
            beam_on_hours=Decimal(str(hours)),
        )
    instrument.turbo = f.PumpFactory(
        instrument=instrument, name="turbo", installed_on=dt.date(2030, 1, 1)
    )
    return instrument


def _emitter(body: dict) -> dict:
    return next(c for c in body["counters"] if c["counter"] == "emitter_hours")


def test_counters_are_upkeeps_own(world, lab6):
    api = world.client_for("staff")
    body = api.get(f"{BASE}/counters/").json()
    assert body["instrument"] == "lab6-sem"
    expected = [s.as_dict() for s in queries.instrument_status(lab6)]
    assert [c["key"] for c in body["counters"]] == [c["key"] for c in expected]
    emitter = _emitter(body)
    # A LaB6 emitter wears while the beam is on (trade practice): 3 + 1.5 h of beam.
    assert emitter["basis"] == "beam_on" and emitter["value"] == 4.5
    assert emitter == next(c for c in expected if c["counter"] == "emitter_hours")


def test_setting_a_limit_changes_the_counter_and_writes_history(world, lab6):
    api = world.client_for("staff")
    first = api.post(f"{BASE}/limits/", {"counter": "emitter_hours", "rated": "900"}, format="json")
    assert first.status_code == 200
    assert first.json()["rated"] == "900.0" and first.json()["set_by"] == "mara.manager"
    again = api.post(
        f"{BASE}/limits/",
        {"counter": "emitter_hours", "rated": "1000", "warn_percent": 90},
        format="json",
    )
    assert again.json()["id"] == first.json()["id"]
    emitter = _emitter(api.get(f"{BASE}/counters/").json())
    # 4.5 h of 1000 h (by hand): share 0.0045, well under the 90 % warn level.
    assert emitter["rated"] == 1000.0 and emitter["rated_is_default"] is False
    assert emitter["share"] == pytest.approx(0.0045) and emitter["state"] == "ok"
    rows = Limit.history.filter(id=first.json()["id"]).order_by("history_id")
    assert [(h.history_type, h.history_user) for h in rows] == [
        ("+", world.facility.manager),
        ("~", world.facility.manager),
    ]
    listed = api.get(f"{BASE}/limits/").json()["results"]
    assert [row["rated"] for row in listed] == ["1000.0"]


def test_service_event_through_a_token_names_its_author(world, lab6):
    staff = world.facility.manager
    issued = tokens.create_token(user=staff, name="month-end", scopes=["read", "write"])
    api = world.client_for("anonymous")
    api.credentials(HTTP_AUTHORIZATION=f"Bearer {issued.secret}")
    body = {
        "kind": "pump_service",
        "pump": lab6.turbo.pk,
        "performed_at": (NOW - dt.timedelta(days=1)).isoformat(),
        "performed_by": "vendor engineer",
        "cost": "1250.5",
    }
    created = api.post(f"{BASE}/service-events/", body, format="json")
    assert created.status_code == 201, created.json()
    out = created.json()
    # Money as a string with its two decimal places.
    assert out["cost"] == "1250.50" and out["pump_name"] == "turbo"
    event = ServiceEvent.objects.get(pk=out["id"])
    [row] = event.history.all()
    assert (row.history_type, row.history_user) == ("+", staff)
    listed = api.get(f"{BASE}/service-events/").json()["results"]
    assert [e["id"] for e in listed] == [event.pk]


def test_meter_reading_history_and_a_repeat_is_a_conflict(world, lab6):
    api = world.client_for("staff")
    body = {"counter": "emitter_hours", "value": "5.25", "read_at": NOW.isoformat()}
    created = api.post(f"{BASE}/meter-readings/", body, format="json")
    assert created.status_code == 201 and created.json()["value"] == "5.25"
    reading = MeterReading.objects.get(pk=created.json()["id"])
    assert reading.history.get().history_user == world.facility.manager
    repeat = api.post(f"{BASE}/meter-readings/", body, format="json")
    assert repeat.status_code == 409
    assert repeat.json()["error"]["code"] == "conflict"
    assert "read_at" in repeat.json()["error"]["fields"]
    # The meter wins from its reading on: 5.25 h against 4.5 h in the logbook.
    emitter = _emitter(api.get(f"{BASE}/counters/").json())
    assert emitter["value"] == 5.25 and emitter["latest_reading"]["drift"] == 0.75


@pytest.mark.parametrize(
    ("body", "field"),
    [
        # A pump service names its pump; a bake-out names none.
        ({"kind": "pump_service"}, "pump"),
        ({"kind": "bake_out", "part": "door-seal"}, "part"),
        # Work recorded once it has happened, not a day ahead.
        (
            {"kind": "bake_out", "performed_at": (NOW + dt.timedelta(days=1)).isoformat()},
            "performed_at",
        ),
        ({"kind": "bake_out", "cost": "-3"}, "cost"),
        ({"kind": "boiled"}, "kind"),
    ],
)
def test_refusals_are_400_naming_the_field(world, lab6, body, field):
    api = world.client_for("staff")
    payload = {"performed_at": (NOW - dt.timedelta(hours=2)).isoformat(), **body}
    response = api.post(f"{BASE}/service-events/", payload, format="json")
    assert response.status_code == 400, response.json()
    assert field in response.json()["error"]["fields"]
    assert not ServiceEvent.objects.exists()


def test_another_instruments_pump_is_refused(world, lab6):
    other = f.PumpFactory(instrument=world.free, name="scroll")
    api = world.client_for("staff")
    body = {"kind": "pump_service", "pump": other.pk, "performed_at": NOW.isoformat()}
    response = api.post(f"{BASE}/service-events/", body, format="json")
    assert response.status_code == 400
    assert response.json()["error"]["fields"] == {"pump": ["Not on this instrument."]}
    missing = api.post(f"{BASE}/service-events/", {**body, "pump": 999_999}, format="json")
    assert missing.status_code == 404 and "pump" in missing.json()["error"]["fields"]


def _alert(instrument, n: int = 1) -> Alert:
    return Alert.objects.create(
        topic=f"test:{instrument.code}:{n}",
        counter_key=f"{instrument.code}:emitter_hours",
        instrument=instrument,
        counter="emitter_hours",
        level="warn",
        value=810,
        rated=900,
        message=f"{instrument.name}: emitter past 90 %",
        raised_at=NOW - dt.timedelta(hours=n),
    )


def test_alerts_open_and_acknowledged(world, lab6):
    alert = _alert(lab6)
    other = _alert(world.free, 2)
    api = world.client_for("staff")
    listed = api.get("/api/v1/upkeep/alerts/", {"instrument": "lab6-sem"}).json()["results"]
    assert [a["id"] for a in listed] == [alert.pk]
    done = api.post(f"/api/v1/upkeep/alerts/{alert.pk}/acknowledge/")
    assert done.status_code == 200 and done.json()["acknowledged_by"] == "mara.manager"
    assert [a["id"] for a in api.get("/api/v1/upkeep/alerts/").json()["results"]] == [other.pk]
    # Acknowledging again changes nothing.
    again = api.post(f"/api/v1/upkeep/alerts/{alert.pk}/acknowledge/")
    assert again.json()["acknowledged_at"] == done.json()["acknowledged_at"]


def test_non_staff_are_refused_before_anything_is_looked_up(world, lab6):
    for role in ("researcher_a", "leader_a", "client"):
        api = world.client_for(role)
        for url in (f"{BASE}/counters/", "/api/v1/upkeep/instruments/no-such/limits/"):
            response = api.get(url)
            assert response.status_code == 403, (role, url)
            assert response.json()["error"]["code"] == "not_allowed"
        body = {"kind": "bake_out", "performed_at": NOW.isoformat()}
        assert api.post(f"{BASE}/service-events/", body, format="json").status_code == 403
    assert not ServiceEvent.objects.exists()


@pytest.mark.parametrize("kind", ["service-events", "meter-readings"])
def test_nested_lists_do_not_grow_with_rows(world, lab6, kind):
    api = world.client_for("staff")

    def add(n: int) -> None:
        for i in range(n):
            at = NOW - dt.timedelta(days=5, hours=i + 1 + add.count)
            if kind == "service-events":
                ServiceEvent.objects.create(
                    instrument=lab6,
                    kind="alignment",
                    performed_at=at,
                    recorded_by=world.facility.manager,
                )
            else:
                MeterReading.objects.create(
                    instrument=lab6,
                    counter="emitter_hours",
                    value=1,
                    read_at=at,
                    recorded_by=world.facility.manager,
                )
        add.count += n

    add.count = 0

    def cost() -> tuple[int, int]:
        with CaptureQueriesContext(connection) as ctx:
            rows = api.get(f"{BASE}/{kind}/").json()["results"]
        return len(ctx.captured_queries), len(rows)

    add(2)
    two = cost()
    add(8)
    ten = cost()
    assert (two[1], ten[1]) == (2, 10)
    assert ten[0] == two[0]
