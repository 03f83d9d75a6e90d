"""API tokens: stored as a digest, expiring, revocable, scoped, bound, throttled."""

from __future__ import annotations

import datetime as dt
import hashlib

import pytest
from rest_framework.test import APIClient

from api import tokens
from api.models import ApiToken
from facility.errors import Conflict, Invalid, NotAllowed
from tests.api.conftest import NOW


def test_only_a_digest_of_the_secret_is_stored(facility):
    issued = tokens.create_token(user=facility.researcher_a, name="sheet", scopes=["read"])
    row = ApiToken.objects.values().get(pk=issued.token.pk)
    assert issued.secret not in {str(v) for v in row.values()}
    # SHA-256 as the standard library computes it (FIPS 180-4).
    assert row["digest"] == hashlib.sha256(issued.secret.encode()).hexdigest()
    assert issued.secret.startswith("bl_") and len(issued.secret) >= 40
    assert issued.secret.startswith(row["prefix"])


def test_authenticate_records_use_at_most_once_a_minute(facility, clock, django_assert_num_queries):
    issued = tokens.create_token(user=facility.researcher_a, name="sheet")
    with django_assert_num_queries(2):  # the lookup, and the last-use update
        token = tokens.authenticate(issued.secret)
    assert token.last_used_at == NOW
    with django_assert_num_queries(1):  # within the minute: no write
        tokens.authenticate(issued.secret)
    clock.shift(dt.timedelta(minutes=2))
    tokens.authenticate(issued.secret)
    assert ApiToken.objects.get().last_used_at == NOW + dt.timedelta(minutes=2)


def _revoked(f):
    issued = tokens.create_token(user=f.researcher_a, name="sheet")
    tokens.revoke_token(token=issued.token, by=f.researcher_a)
    return issued.secret


def _expired(f):
    made = NOW - dt.timedelta(days=2)
    return tokens.create_token(user=f.researcher_a, name="old", expires_in_days=1, now=made).secret


def _owner_left(f):
    issued = tokens.create_token(user=f.researcher_a, name="sheet")
    f.researcher_a.is_active = False
    f.researcher_a.save()
    return issued.secret


@pytest.mark.parametrize(
    ("make_dead", "reason"),
    [(_revoked, "revoked"), (_expired, "expired"), (_owner_left, "no longer active")],
)
def test_dead_tokens_are_refused(facility, clock, make_dead, reason):
    secret = make_dead(facility)
    with pytest.raises(tokens.TokenRejected, match=reason):
        tokens.authenticate(secret)


def test_unknown_and_malformed_secrets_are_refused(facility):
    for secret in ("bl_" + "x" * 43, "not-ours", "bl_" + "y" * 300):
        with pytest.raises(tokens.TokenRejected):
            tokens.authenticate(secret)


def test_instrument_token_dies_with_its_issuers_staff_status(facility):
    issued = tokens.create_instrument_token(instrument=facility.sem, name="PC", by=facility.manager)
    assert issued.token.scopes == ["upload"] and issued.token.instrument == facility.sem
    tokens.authenticate(issued.secret)
    facility.manager.is_staff = False
    facility.manager.save()
    with pytest.raises(tokens.TokenRejected, match="no longer staff"):
        tokens.authenticate(issued.secret)


def test_rules_of_issuing(facility):
    a = facility.researcher_a
    with pytest.raises(Invalid, match="Unknown scope"):
        tokens.create_token(user=a, name="x", scopes=["admin"])
    with pytest.raises(Invalid, match="at least one scope"):
        tokens.create_token(user=a, name="x", scopes=[])
    with pytest.raises(Invalid, match="1 to 366 days"):
        tokens.create_token(user=a, name="x", expires_in_days=0)
    with pytest.raises(Invalid, match="Name the token"):
        tokens.create_token(user=a, name="  ")
    with pytest.raises(NotAllowed):
        tokens.create_token(user=a, name="x", by=facility.researcher_b)
    with pytest.raises(NotAllowed):
        tokens.create_instrument_token(instrument=facility.sem, name="PC", by=a)
    assert ApiToken.objects.count() == 0  # every refusal wrote nothing


def test_live_tokens_are_capped(facility):
    for n in range(tokens.MAX_LIVE_TOKENS):
        tokens.create_token(user=facility.researcher_a, name=f"t{n}")
    with pytest.raises(Conflict, match="revoke"):
        tokens.create_token(user=facility.researcher_a, name="one more")


def test_revoking(facility):
    issued = tokens.create_token(user=facility.researcher_a, name="x")
    with pytest.raises(NotAllowed):
        tokens.revoke_token(token=issued.token, by=facility.researcher_b)
    first = tokens.revoke_token(token=issued.token, by=facility.manager)
    again = tokens.revoke_token(token=issued.token, by=facility.researcher_a)
    assert first.revoked_at == again.revoked_at and again.revoked_by == facility.manager


def test_the_secret_is_shown_once(facility):
    api = APIClient()
    api.force_login(facility.researcher_a)
    made = api.post("/api/v1/tokens/", {"name": "sheet", "scopes": ["read"]}, format="json")
    assert made.status_code == 201
    secret = made.json()["secret"]
    listed = api.get("/api/v1/tokens/").json()["results"]
    assert [t["id"] for t in listed] == [made.json()["id"]]
    assert secret not in str(listed)
    # The new token works, and cannot itself make tokens.
    script = APIClient()
    script.credentials(HTTP_AUTHORIZATION=f"Bearer {secret}")
    assert script.get("/api/v1/me/").json()["token"]["scopes"] == ["read"]
    refused = script.post("/api/v1/tokens/", {"name": "child"}, format="json")
    assert refused.status_code == 403


def test_staff_issue_instrument_tokens_through_the_api(facility):
    api = APIClient()
    api.force_login(facility.manager)
    body = {"name": "fe-sem PC", "instrument": "fe-sem", "instrument_pc": True, "scopes": ["read"]}
    made = api.post("/api/v1/tokens/", body, format="json").json()
    assert (made["kind"], made["scopes"], made["instrument"]) == (
        "instrument",
        ["upload"],
        "fe-sem",
    )
    api.force_login(facility.researcher_a)
    refused = api.post("/api/v1/tokens/", body, format="json")
    assert refused.status_code == 403
    assert refused.json()["error"]["code"] == "not_allowed"


def test_token_creation_is_throttled(facility, settings):
    settings.REST_FRAMEWORK = {
        **settings.REST_FRAMEWORK,
        "DEFAULT_THROTTLE_RATES": {"token_creation": "2/hour", "uploads": "100/hour"},
    }
    api = APIClient()
    api.force_login(facility.researcher_a)
    codes = [api.post("/api/v1/tokens/", {"name": f"t{n}"}, format="json") for n in range(3)]
    assert [r.status_code for r in codes] == [201, 201, 429]
    assert codes[2].json()["error"]["code"] == "throttled"
    assert int(codes[2]["Retry-After"]) > 0
    assert ApiToken.objects.count() == 2


def test_csrf_protects_session_writes(facility):
    api = APIClient(enforce_csrf_checks=True)
    api.force_login(facility.researcher_a)
    refused = api.post("/api/v1/tokens/", {"name": "x"}, format="json")
    assert refused.status_code == 403
    assert "CSRF" in refused.json()["error"]["message"]


def test_malformed_authorization_header(facility):
    api = APIClient()
    api.credentials(HTTP_AUTHORIZATION="Bearer two parts")
    answer = api.get("/api/v1/me/")
    assert answer.status_code == 401
    assert answer["WWW-Authenticate"] == 'Bearer realm="api"'
