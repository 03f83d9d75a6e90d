"""Role × endpoint matrix: the status every kind of caller gets from every endpoint.

Rows are every (method, path) the URL resolver serves under /api/v1/; an endpoint added without a
row here fails `test_every_endpoint_is_in_the_matrix`. Each cell runs on the same seeded world
(writes are rolled back between roles), with the URL naming group A's objects. Expected statuses
follow the rules of issue 5: outside your scope is 404, signed in but refused is 403, no or a
dead token is 401 (RFC 6750 §3.1 / RFC 9110 §15.5.2 for 401 with WWW-Authenticate).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.db import transaction

from facility.billing import services as billing
from facility.billing.models import Charge, Statement
from facility.upkeep.models import Alert
from tests.api.conftest import NOW, ROLES, World, small_tiff
from tests.api.endpoints import resolver_endpoints, schema_operations


def cells(
    researcher_a: int,
    researcher_b: int,
    leader_a: int,
    client: int,
    staff: int,
    upload_token: int = 403,
    anonymous: int = 401,
    expired_token: int = 401,
    revoked_token: int = 401,
) -> dict[str, int]:
    return {
        "anonymous": anonymous,
        "researcher_a": researcher_a,
        "researcher_b": researcher_b,
        "leader_a": leader_a,
        "client": client,
        "staff": staff,
        "upload_token": upload_token,
        "expired_token": expired_token,
        "revoked_token": revoked_token,
    }


EVERYONE_READS = cells(200, 200, 200, 200, 200)
GROUP_A_READS = cells(200, 404, 200, 404, 200)
# The operator (researcher A) and staff may change a session's log; the leader sees but may not.
OPERATOR_WRITES = cells(200, 404, 403, 404, 200)
OPERATOR_CREATES = cells(201, 404, 403, 404, 201)
PUBLIC = dict.fromkeys(ROLES, 200)


@dataclass
class Call:
    url: str
    data: dict | None = None
    format: str = "json"


def upload_file(seed: int = 21) -> dict:
    return {"file": SimpleUploadedFile("new.tif", small_tiff(seed), "image/tiff")}


def day(days: int, hour: int) -> str:
    return (NOW.replace(hour=hour) + dt.timedelta(days=days)).isoformat()


S, B, M, F = "/api/v1/sessions/", "/api/v1/bookings/", "/api/v1/micrographs/", "/api/v1/flags/"
U = "/api/v1/upkeep/instruments/"


def staff_only(status: int) -> dict[str, int]:
    return cells(403, 403, 403, 403, status)


STAFF_READS = staff_only(200)


BS = "/api/v1/billing/statements/"
LEADER_READS = cells(404, 404, 200, 404, 200)


def _adjustment(w: World) -> Charge:
    """A draft February statement of group A's account, holding one adjustment line."""
    return billing.add_adjustment(
        account=w.a.account,
        amount="-5.00",
        reason="matrix",
        by=w.facility.manager,
        month=dt.date(2031, 2, 1),
    )


def _statement(w: World) -> Statement:
    return _adjustment(w).statement


def _alert(w: World) -> Alert:
    """An open alert on the facility's SEM (made inside each role's rolled-back transaction)."""
    return Alert.objects.create(
        topic="matrix:fe-sem:emitter:warn",
        counter_key="fe-sem:emitter_hours",
        instrument=w.facility.sem,
        counter="emitter_hours",
        level="warn",
        value=7000,
        rated=8000,
        message="Field-emission SEM — emitter past its warn level",
        raised_at=NOW,
    )


# (METHOD, schema path) → (how to call it with group A's objects, expected status by role)
MATRIX: dict[tuple[str, str], tuple[Callable[[World], Call], dict[str, int]]] = {
    ("GET", "/api/v1/schema/"): (lambda w: Call("/api/v1/schema/"), PUBLIC),
    ("GET", "/api/v1/docs/"): (lambda w: Call("/api/v1/docs/"), PUBLIC),
    ("GET", "/api/v1/me/"): (lambda w: Call("/api/v1/me/"), cells(200, 200, 200, 200, 200, 200)),
    ("GET", "/api/v1/accounts/"): (lambda w: Call("/api/v1/accounts/"), EVERYONE_READS),
    ("GET", "/api/v1/instruments/"): (lambda w: Call("/api/v1/instruments/"), EVERYONE_READS),
    ("GET", "/api/v1/instruments/{code}/"): (
        lambda w: Call("/api/v1/instruments/fe-sem/"),
        EVERYONE_READS,
    ),
    ("GET", "/api/v1/instruments/{code}/busy/"): (
        lambda w: Call(
            f"/api/v1/instruments/fe-sem/busy/?window_start={day(0, 0)[:19]}Z"
            f"&window_end={day(14, 0)[:19]}Z"
        ),
        EVERYONE_READS,
    ),
    ("POST", "/api/v1/instruments/{code}/micrographs/"): (
        lambda w: Call("/api/v1/instruments/fe-sem/micrographs/", upload_file(), "multipart"),
        # B and the client have no open session on it they can see: 409, naming no one.
        cells(201, 409, 403, 409, 201, upload_token=201),
    ),
    ("GET", B): (lambda w: Call(B), EVERYONE_READS),
    ("POST", B): (
        lambda w: Call(
            B,
            {
                "instrument": "fe-sem",
                "account": w.a.account.code,
                "starts_at": day(3, 10),
                "ends_at": day(3, 11),
            },
        ),
        # Staff belong to no group: group A's account refuses them (403), B and the client
        # cannot see it (404).
        cells(201, 404, 201, 404, 403),
    ),
    ("GET", B + "{id}/"): (lambda w: Call(f"{B}{w.a.booking.pk}/"), GROUP_A_READS),
    ("POST", B + "{id}/move/"): (
        lambda w: Call(
            f"{B}{w.a.booking.pk}/move/", {"starts_at": day(8, 10), "ends_at": day(8, 11)}
        ),
        cells(200, 404, 200, 404, 200),
    ),
    ("POST", B + "{id}/cancel/"): (
        lambda w: Call(f"{B}{w.a.booking.pk}/cancel/"),
        cells(200, 404, 200, 404, 200),
    ),
    ("POST", B + "{id}/confirm/"): (
        lambda w: Call(f"{B}{w.a.booking.pk}/confirm/"),
        cells(403, 404, 403, 404, 200),
    ),
    ("POST", B + "{id}/no-show/"): (
        lambda w: Call(f"{B}{w.a.booking.pk}/no-show/"),
        # Staff may, but not before the booking starts: 400.
        cells(403, 404, 403, 404, 400),
    ),
    ("GET", S): (lambda w: Call(S), EVERYONE_READS),
    ("POST", S): (
        lambda w: Call(S, {"instrument": w.free.code, "account": w.a.account.code}),
        cells(201, 404, 201, 404, 403),
    ),
    ("GET", S + "{id}/"): (lambda w: Call(f"{S}{w.a.session.pk}/"), GROUP_A_READS),
    ("PATCH", S + "{id}/"): (
        lambda w: Call(f"{S}{w.a.session.pk}/", {"notes": "stage drift after 20 min"}),
        OPERATOR_WRITES,
    ),
    ("POST", S + "{id}/check-out/"): (
        lambda w: Call(f"{S}{w.a.session.pk}/check-out/", {"vent_cycles": 1}),
        OPERATOR_WRITES,
    ),
    ("POST", S + "{id}/conditions/"): (
        lambda w: Call(f"{S}{w.a.session.pk}/conditions/", {"accelerating_voltage_kv": 2.0}),
        OPERATOR_CREATES,
    ),
    ("PATCH", S + "{id}/conditions/{conditions_id}/"): (
        lambda w: Call(
            f"{S}{w.a.session.pk}/conditions/{w.a.conditions.pk}/", {"working_distance_mm": 4.5}
        ),
        OPERATOR_WRITES,
    ),
    ("POST", S + "{id}/specimen/"): (
        lambda w: Call(
            f"{S}{w.a.session.pk}/specimen/",
            {
                "name": "sintered pellet",
                "material": "zirconia",
                "material_class": "ceramic",
                "conductivity": "insulating",
                "form": "bulk",
            },
        ),
        OPERATOR_CREATES,
    ),
    ("POST", S + "{id}/coating/"): (
        lambda w: Call(f"{S}{w.a.session.pk}/coating/", {"material": "C", "thickness_nm": 10}),
        OPERATOR_CREATES,
    ),
    ("POST", S + "{id}/micrographs/"): (
        lambda w: Call(f"{S}{w.a.session.pk}/micrographs/", upload_file(), "multipart"),
        cells(201, 404, 403, 404, 201, upload_token=201),
    ),
    ("GET", M): (lambda w: Call(M), EVERYONE_READS),
    ("GET", M + "{id}/"): (lambda w: Call(f"{M}{w.a.micrograph.pk}/"), GROUP_A_READS),
    ("GET", M + "{id}/original/"): (
        lambda w: Call(f"{M}{w.a.micrograph.pk}/original/"),
        GROUP_A_READS,
    ),
    ("GET", M + "{id}/thumbnail/"): (
        lambda w: Call(f"{M}{w.a.micrograph.pk}/thumbnail/"),
        GROUP_A_READS,
    ),
    ("GET", M + "{id}/assessment/"): (
        lambda w: Call(f"{M}{w.a.micrograph.pk}/assessment/"),
        GROUP_A_READS,
    ),
    ("GET", F): (lambda w: Call(F), EVERYONE_READS),
    ("GET", F + "{id}/"): (lambda w: Call(f"{F}{w.a.flag.pk}/"), GROUP_A_READS),
    ("POST", F + "{id}/dismiss/"): (
        lambda w: Call(f"{F}{w.a.flag.pk}/dismiss/", {"reason": "coated before the session"}),
        OPERATOR_WRITES,
    ),
    ("GET", "/api/v1/specimens/"): (lambda w: Call("/api/v1/specimens/"), EVERYONE_READS),
    ("GET", "/api/v1/specimens/{id}/"): (
        lambda w: Call(f"/api/v1/specimens/{w.a.specimen.pk}/"),
        GROUP_A_READS,
    ),
    # The finder: everyone signed in may search (hits of others come anonymised); group A
    # shares its details, so its images' thumbnails reach every role, not the upload token.
    ("GET", "/api/v1/conditions/search/"): (
        lambda w: Call("/api/v1/conditions/search/?material_class=polymer"),
        EVERYONE_READS,
    ),
    ("POST", "/api/v1/conditions/search/"): (
        lambda w: Call("/api/v1/conditions/search/", {"material_class": "polymer"}),
        EVERYONE_READS,
    ),
    ("GET", "/api/v1/conditions/thumbnails/{micrograph_id}/"): (
        lambda w: Call(f"/api/v1/conditions/thumbnails/{w.a.micrograph.pk}/"),
        EVERYONE_READS,
    ),
    # Upkeep is staff business: everyone else 403, whatever the URL names.
    ("GET", U + "{code}/counters/"): (lambda w: Call(f"{U}fe-sem/counters/"), STAFF_READS),
    ("GET", U + "{code}/service-events/"): (
        lambda w: Call(f"{U}fe-sem/service-events/"),
        STAFF_READS,
    ),
    ("POST", U + "{code}/service-events/"): (
        lambda w: Call(
            f"{U}fe-sem/service-events/",
            {"kind": "alignment", "performed_at": day(-1, 9), "cost": "80.00"},
        ),
        staff_only(201),
    ),
    ("GET", U + "{code}/meter-readings/"): (
        lambda w: Call(f"{U}fe-sem/meter-readings/"),
        STAFF_READS,
    ),
    ("POST", U + "{code}/meter-readings/"): (
        lambda w: Call(
            f"{U}fe-sem/meter-readings/",
            {"counter": "emitter_hours", "value": "1200.5", "read_at": day(0, 9)},
        ),
        staff_only(201),
    ),
    ("GET", U + "{code}/limits/"): (lambda w: Call(f"{U}fe-sem/limits/"), STAFF_READS),
    ("POST", U + "{code}/limits/"): (
        lambda w: Call(f"{U}fe-sem/limits/", {"counter": "emitter_hours", "rated": "8000"}),
        STAFF_READS,
    ),
    ("GET", "/api/v1/upkeep/alerts/"): (lambda w: Call("/api/v1/upkeep/alerts/"), STAFF_READS),
    ("POST", "/api/v1/upkeep/alerts/{id}/acknowledge/"): (
        lambda w: Call(f"/api/v1/upkeep/alerts/{_alert(w).pk}/acknowledge/"),
        STAFF_READS,
    ),
    # Billing: statements are seen by staff and the group's leader (researchers and the client
    # lead no group); writes are staff's, the leader who sees the row gets 403.
    ("GET", BS): (lambda w: Call(BS), EVERYONE_READS),
    ("GET", BS + "{id}/"): (lambda w: Call(f"{BS}{_statement(w).pk}/"), LEADER_READS),
    ("GET", BS + "{id}/lines/"): (lambda w: Call(f"{BS}{_statement(w).pk}/lines/"), LEADER_READS),
    ("GET", BS + "{id}/csv/"): (lambda w: Call(f"{BS}{_statement(w).pk}/csv/"), LEADER_READS),
    ("GET", BS + "{id}/pdf/"): (lambda w: Call(f"{BS}{_statement(w).pk}/pdf/"), LEADER_READS),
    ("POST", BS + "{id}/finalise/"): (
        lambda w: Call(f"{BS}{_statement(w).pk}/finalise/"),
        cells(404, 404, 403, 404, 200),
    ),
    ("POST", BS + "draft-month/"): (
        lambda w: Call(f"{BS}draft-month/", {"month": "2031-02"}),
        staff_only(200),
    ),
    ("GET", "/api/v1/billing/lines/"): (lambda w: Call("/api/v1/billing/lines/"), EVERYONE_READS),
    ("POST", "/api/v1/billing/adjustments/"): (
        lambda w: Call(
            "/api/v1/billing/adjustments/",
            {"account": w.a.account.code, "amount": "-12.50", "reason": "x", "month": "2031-03"},
        ),
        # Researcher A sees the account but may not adjust; B and the client do not see it.
        cells(403, 404, 403, 404, 201),
    ),
    ("DELETE", "/api/v1/billing/adjustments/{id}/"): (
        lambda w: Call(f"/api/v1/billing/adjustments/{_adjustment(w).pk}/"),
        cells(404, 404, 403, 404, 204),
    ),
    ("GET", "/api/v1/billing/usage/{month}/"): (
        lambda w: Call("/api/v1/billing/usage/2031-02/"),
        STAFF_READS,
    ),
    ("GET", "/api/v1/billing/usage/{month}/csv/"): (
        lambda w: Call("/api/v1/billing/usage/2031-02/csv/"),
        STAFF_READS,
    ),
    # Tokens are managed with the login session only: any token gets 403 here.
    ("GET", "/api/v1/tokens/"): (lambda w: Call("/api/v1/tokens/"), EVERYONE_READS),
    ("POST", "/api/v1/tokens/"): (
        lambda w: Call("/api/v1/tokens/", {"name": "usage sheet", "scopes": ["read"]}),
        cells(201, 201, 201, 201, 201),
    ),
    ("POST", "/api/v1/tokens/{id}/revoke/"): (
        lambda w: Call(f"/api/v1/tokens/{w.a.token.pk}/revoke/"),
        cells(200, 404, 404, 404, 200),
    ),
}


def test_every_endpoint_is_in_the_matrix():
    served = resolver_endpoints()
    assert served == set(MATRIX), (
        f"missing from the matrix: {sorted(served - set(MATRIX))}; "
        f"no longer served: {sorted(set(MATRIX) - served)}"
    )


def test_the_schema_documents_every_endpoint():
    documented = set(schema_operations())
    served = resolver_endpoints() - {("GET", "/api/v1/schema/"), ("GET", "/api/v1/docs/")}
    assert documented == served


def _call(world: World, role: str, call: Call, method: str) -> int:
    api = world.client_for(role)
    send = getattr(api, method.lower())
    if method == "GET":
        return send(call.url).status_code
    return send(call.url, call.data or {}, format=call.format).status_code


@pytest.mark.parametrize("endpoint", sorted(MATRIX), ids=lambda e: f"{e[0]} {e[1]}")
def test_matrix(world, endpoint):
    method = endpoint[0]
    build, expected = MATRIX[endpoint]
    got = {}
    for role in ROLES:
        # Every role meets the same world: a write by one is undone before the next.
        with transaction.atomic():
            got[role] = _call(world, role, build(world), method)
            transaction.set_rollback(True)
    assert got == expected
