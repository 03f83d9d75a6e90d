"""Writes through the API: related ids scoped, idempotency keys honoured, clashes anonymous."""

from __future__ import annotations

import datetime as dt

from facility.bookings.models import Booking
from facility.logbook.models import InstrumentSession
from tests.api.conftest import NOW


def at(days: int, hour: int) -> str:
    """An ISO time `days` after NOW (a Tuesday); +4 and +5 fall on the weekend."""
    return (NOW.replace(hour=hour) + dt.timedelta(days=days)).isoformat()


def booking(account: str, start: str, end: str, **extra) -> dict:
    return {"instrument": "fe-sem", "account": account, "starts_at": start, "ends_at": end, **extra}


def test_no_booking_on_another_groups_account(world):
    api = world.client_for("researcher_a")
    answer = api.post("/api/v1/bookings/", booking("LAR-01", at(3, 10), at(3, 11)), format="json")
    assert answer.status_code == 404
    error = answer.json()["error"]
    assert error["fields"] == {"account": ["Not found."]}
    assert "LAR-01" in error["message"]
    assert not Booking.objects.filter(
        starts_at=NOW.replace(hour=10) + dt.timedelta(days=3)
    ).exists()


def test_only_staff_book_for_someone_else(world):
    body = booking("KES-01", at(3, 10), at(3, 11), user="lena.leader")
    refused = world.client_for("researcher_a").post("/api/v1/bookings/", body, format="json")
    # A non-staff caller can name only themselves: another person is not visible to them.
    assert refused.status_code == 404 and refused.json()["error"]["fields"] == {
        "user": ["Not found."]
    }
    made = world.client_for("staff").post(
        "/api/v1/bookings/", {**body, "user": "ada.researcher"}, format="json"
    )
    assert made.status_code == 201
    assert made.json()["user"] == "ada.researcher"


def test_a_clash_names_no_one(world):
    # B books the facility SEM first; A then asks for an overlapping hour.
    b = world.client_for("researcher_b")
    first = b.post("/api/v1/bookings/", booking("LAR-01", at(3, 10), at(3, 12)), format="json")
    assert first.status_code == 201
    clash = world.client_for("researcher_a").post(
        "/api/v1/bookings/", booking("KES-01", at(3, 11), at(3, 13)), format="json"
    )
    assert clash.status_code == 409
    assert clash.json()["error"]["code"] == "conflict"
    assert "ben" not in clash.content.decode() and "LAR" not in clash.content.decode()


def test_owner_group_and_state_cannot_be_set(world):
    body = booking("KES-01", at(3, 10), at(3, 11), state="done", group=world.b.group.pk, id=999)
    made = world.client_for("researcher_a").post("/api/v1/bookings/", body, format="json").json()
    assert (made["state"], made["group"], made["user"]) == (
        "confirmed",
        world.a.group.pk,
        "ada.researcher",
    )
    assert made["id"] != 999


def test_booking_idempotency_key(world):
    api = world.client_for("researcher_a")
    body = booking("KES-01", at(9, 10), at(9, 11))
    key = {"HTTP_IDEMPOTENCY_KEY": "6f1c2b0e-booking-1"}
    first = api.post("/api/v1/bookings/", body, format="json", **key)
    again = api.post("/api/v1/bookings/", body, format="json", **key)
    assert (first.status_code, again.status_code) == (201, 201)
    assert first.json()["id"] == again.json()["id"]
    assert Booking.objects.filter(idempotency_key="6f1c2b0e-booking-1").count() == 1
    other = api.post(
        "/api/v1/bookings/", booking("KES-01", at(10, 10), at(10, 11)), format="json", **key
    )
    assert other.status_code == 409
    bad = api.post("/api/v1/bookings/", body, format="json", HTTP_IDEMPOTENCY_KEY="has spaces in")
    assert bad.status_code == 400 and "Idempotency-Key" in bad.json()["error"]["fields"]


def test_check_in_idempotency_key(world):
    api = world.client_for("researcher_a")
    body = {"instrument": "tabletop", "account": "KES-01"}
    key = {"HTTP_IDEMPOTENCY_KEY": "walk-up-2031-03-04"}
    first = api.post("/api/v1/sessions/", body, format="json", **key)
    again = api.post("/api/v1/sessions/", body, format="json", **key)
    assert (first.status_code, again.status_code) == (201, 201)
    assert first.json()["id"] == again.json()["id"]
    assert InstrumentSession.objects.filter(instrument=world.free).count() == 1


def test_check_in_with_someone_elses_booking_is_not_found(world):
    answer = world.client_for("researcher_a").post(
        "/api/v1/sessions/",
        {"instrument": "vp-sem", "booking": world.b.booking.pk},
        format="json",
    )
    assert answer.status_code == 404
    assert answer.json()["error"]["fields"] == {"booking": ["Not found."]}


def test_move_and_cancel(world):
    api = world.client_for("leader_a")  # the group leader may manage the group's bookings
    url = f"/api/v1/bookings/{world.a.booking.pk}"
    moved = api.post(f"{url}/move/", {"starts_at": at(8, 9), "ends_at": at(8, 10)}, format="json")
    assert moved.status_code == 200 and moved.json()["starts_at"].startswith("2031-03-12T09:00")
    cancelled = api.post(f"{url}/cancel/")
    assert cancelled.json()["state"] == "cancelled"
    again = api.post(f"{url}/cancel/")
    assert again.status_code == 409


def test_logging_a_session(world):
    api = world.client_for("researcher_a")
    url = f"/api/v1/sessions/{world.a.session.pk}"
    out_of_range = api.post(f"{url}/conditions/", {"accelerating_voltage_kv": 500}, format="json")
    assert out_of_range.status_code == 400
    assert "accelerating_voltage_kv" in out_of_range.json()["error"]["fields"]
    logged = api.post(
        f"{url}/conditions/", {"accelerating_voltage_kv": 1.5, "detector": "ETD"}, format="json"
    )
    assert logged.status_code == 201
    attached = api.post(f"{url}/specimen/", {"specimen": world.a.specimen.pk}, format="json")
    assert attached.status_code == 200
    foreign = api.post(f"{url}/specimen/", {"specimen": world.b.specimen.pk}, format="json")
    assert foreign.status_code == 404
    coated = api.post(f"{url}/coating/", {"material": "Au-Pd", "thickness_nm": 5}, format="json")
    assert coated.status_code == 201
    closed = api.post(
        f"{url}/check-out/", {"beam_on_hours": "0.75", "vent_cycles": 2}, format="json"
    )
    assert closed.status_code == 200
    body = closed.json()
    assert (body["is_open"], body["beam_on_hours"], body["vent_cycles"]) == (False, "0.75", 2)
    assert [c["accelerating_voltage_kv"] for c in body["conditions"]] == [5.0, 1.5]
    assert api.post(f"{url}/check-out/", {}, format="json").status_code == 409


def test_dismissing_a_flag_needs_a_reason(world):
    api = world.client_for("researcher_a")
    url = f"/api/v1/flags/{world.a.flag.pk}/dismiss/"
    assert api.post(url, {"reason": ""}, format="json").status_code == 400
    done = api.post(url, {"reason": "sputtered off-line, 5 nm Pt"}, format="json").json()
    assert done["dismissed_by"] == "ada.researcher" and done["dismiss_reason"].startswith(
        "sputtered"
    )
