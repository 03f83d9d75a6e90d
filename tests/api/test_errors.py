"""One error shape for every refusal, with the status codes of RFC 9110 §15."""

from __future__ import annotations

import pytest
from django.db import IntegrityError
from rest_framework.test import APIClient

from api.errors import exception_handler
from facility.errors import Closed, NotTrained


def shape(response) -> dict:
    body = response.json()
    assert set(body) == {"error"}
    assert set(body["error"]) == {"code", "message", "fields"}
    assert body["error"]["message"]
    return body["error"]


def test_statuses_and_codes(world, settings):
    api = world.client_for("researcher_a")
    cases = [
        (APIClient().get("/api/v1/sessions/"), 401, "unauthenticated"),
        (api.post("/api/v1/bookings/", {}, format="json"), 400, "invalid"),
        (
            api.generic("POST", "/api/v1/bookings/", b"{not json", content_type="application/json"),
            400,
            "malformed",
        ),
        (
            api.generic("POST", "/api/v1/bookings/", b"x=1", content_type="text/plain"),
            415,
            "unsupported_type",
        ),
        (api.get("/api/v1/sessions/999999/"), 404, "not_found"),
        (api.get("/api/v1/sessions/abc/"), 404, "not_found"),
        (api.get("/api/v1/no-such-thing/"), 404, "not_found"),
        (api.post("/api/v1/no-such-thing/"), 404, "not_found"),
        (api.delete(f"/api/v1/sessions/{world.a.session.pk}/"), 405, "method_not_allowed"),
        (api.get("/api/v1/sessions/?cursor=garbage"), 404, "not_found"),
        (api.get("/api/v1/sessions/?started_after=yesterday"), 400, "invalid"),
        (api.get("/api/v1/sessions/?group=x"), 400, "invalid"),
        (api.post(f"/api/v1/bookings/{world.a.booking.pk}/confirm/"), 403, "not_allowed"),
    ]
    for response, status, code in cases:
        assert (response.status_code, shape(response)["code"]) == (status, code), response.content


def test_invalid_fields_are_named(world):
    api = world.client_for("researcher_a")
    error = shape(
        api.post(
            "/api/v1/bookings/",
            {"instrument": "fe-sem", "starts_at": "tomorrow", "purpose": "party"},
            format="json",
        )
    )
    assert set(error["fields"]) == {"account", "starts_at", "ends_at", "purpose"}
    assert "starts_at" in error["message"]


def test_a_body_over_the_server_limit_is_413(world, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 100
    api = world.client_for("researcher_a")
    answer = api.post("/api/v1/bookings/", {"note": "x" * 500}, format="json")
    assert answer.status_code == 413 and shape(answer)["code"] == "too_large"


def test_domain_errors_keep_their_code_and_fields():
    response = exception_handler(NotTrained("Needs the out-of-hours level."), {})
    assert (response.status_code, response.data["error"]["code"]) == (403, "not_trained")
    response = exception_handler(Closed("Checked out.", fields={"session": ["Closed."]}), {})
    assert response.status_code == 409
    assert response.data["error"] == {
        "code": "closed",
        "message": "Checked out.",
        "fields": {"session": ["Closed."]},
    }


def test_a_database_refusal_is_a_conflict_not_a_crash():
    response = exception_handler(IntegrityError("CHECK constraint failed"), {})
    assert (response.status_code, response.data["error"]["code"]) == (409, "conflict")
    assert exception_handler(RuntimeError("a bug"), {}) is None  # real faults stay 500s


def test_options_points_to_the_schema(world):
    answer = world.client_for("researcher_a").options("/api/v1/sessions/")
    assert answer.status_code == 200
    assert answer.json()["schema"] == "/api/v1/schema/"


@pytest.mark.parametrize(
    "url",
    [
        "/api/v1/flags/?session=-7.2e191",
        "/api/v1/micrographs/?session=1e30",
        "/api/v1/sessions/?group=9223372036854775808",
        "/api/v1/billing/lines/?statement=0",
        "/api/v1/billing/statements/?group=2.5",
    ],
)
def test_an_id_filter_out_of_range_is_400_not_a_database_error(world, url):
    # 2**63 is one past the largest signed 64-bit integer SQLite stores (sqlite.org/datatype3).
    response = world.client_for("researcher_a").get(url)
    assert response.status_code == 400
    name = url.split("?")[1].split("=")[0]
    assert name in shape(response)["fields"]
