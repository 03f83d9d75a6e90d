"""The API token page: make a token and see its secret once, revoke it; staff make an upload-only
token for an instrument's PC and can revoke anyone's."""

from __future__ import annotations

import hashlib
import re

import pytest
from django.test import Client
from django.urls import reverse

from api.models import ApiToken

pytestmark = pytest.mark.django_db

PERSONAS = ["researcher_a", "leader_a", "researcher_b", "client", "manager"]


def _text(response) -> str:
    return re.sub(r"\s+", " ", response.content.decode())


def _secret(response) -> str:
    found = re.search(r'id="new-secret"[^>]*value="([^"]+)"', response.content.decode())
    assert found, "no secret on the page"
    return found.group(1)


@pytest.mark.parametrize("persona", PERSONAS)
def test_token_page_for_every_persona(as_user, facility, persona):
    response = as_user(getattr(facility, persona)).get(reverse("api-tokens"))
    assert response.status_code == 200
    body = _text(response)
    assert "Make a token" in body
    assert ("Token for an instrument PC" in body) == (persona == "manager")


def test_a_new_token_is_shown_once_and_works(as_user, facility):
    client = as_user(facility.researcher_a)
    response = client.post(
        reverse("api-token-create"),
        {"token-name": "usage sheet", "token-scopes": ["read"], "token-expires_in_days": "30"},
    )
    assert response.status_code == 200
    assert response["Cache-Control"] == "no-store"
    secret = _secret(response)
    token = ApiToken.objects.get()
    assert (token.user, token.name, token.scopes) == (
        facility.researcher_a,
        "usage sheet",
        ["read"],
    )
    # Only the SHA-256 digest is kept (FIPS 180-4, via Python's hashlib), never the secret.
    assert token.digest == hashlib.sha256(secret.encode()).hexdigest()
    assert secret not in {token.prefix, token.name, token.digest}
    # Shown once: the list afterwards names the token by its first characters only.
    again = client.get(reverse("api-tokens")).content.decode()
    assert secret not in again and token.prefix in again
    # And the secret really opens the API (RFC 6750 bearer token).
    api = Client().get(reverse("api:me"), HTTP_AUTHORIZATION=f"Bearer {secret}")
    assert api.status_code == 200


def test_a_token_needs_a_name_and_a_scope(as_user, facility):
    response = as_user(facility.researcher_a).post(
        reverse("api-token-create"), {"token-name": "", "token-expires_in_days": "30"}
    )
    assert response.status_code == 400
    body = _text(response)
    assert "This field is required." in body and 'id="new-secret"' not in body
    assert not ApiToken.objects.exists()


def test_a_lifetime_beyond_the_maximum_is_refused(as_user, facility):
    response = as_user(facility.researcher_a).post(
        reverse("api-token-create"),
        {"token-name": "x", "token-scopes": ["read"], "token-expires_in_days": "4000"},
    )
    assert response.status_code == 400
    assert not ApiToken.objects.exists()


def test_instrument_pc_tokens_are_made_by_staff(as_user, facility):
    url = reverse("api-token-create-instrument")
    data = {
        "pc-instrument": facility.sem.pk,
        "pc-name": "acquisition PC",
        "pc-expires_in_days": "366",
    }
    assert as_user(facility.researcher_a).post(url, data).status_code == 403
    assert not ApiToken.objects.exists()
    response = as_user(facility.manager).post(url, data)
    assert response.status_code == 200
    _secret(response)
    token = ApiToken.objects.get()
    assert (token.kind, token.scopes, token.instrument) == ("instrument", ["upload"], facility.sem)


def _token_of(client, name: str) -> ApiToken:
    client.post(
        reverse("api-token-create"),
        {"token-name": name, "token-scopes": ["read"], "token-expires_in_days": "30"},
    )
    return ApiToken.objects.get(name=name)


def test_revoke_own_token_and_not_someone_elses(as_user, facility):
    ada = as_user(facility.researcher_a)
    ben = as_user(facility.researcher_b)
    mine = _token_of(ada, "notebook")
    theirs = _token_of(ben, "script")
    # Another person's token is not found at all (as on the API).
    assert ada.post(reverse("api-token-revoke", args=[theirs.pk])).status_code == 404
    response = ada.post(reverse("api-token-revoke", args=[mine.pk]))
    assert response.status_code == 302
    mine.refresh_from_db()
    theirs.refresh_from_db()
    assert mine.revoked_by == facility.researcher_a and theirs.revoked_at is None
    assert "is revoked; it stops working now" in _text(ada.get(response["Location"]))


def test_staff_see_and_revoke_anyones_live_token(as_user, facility):
    theirs = _token_of(as_user(facility.researcher_b), "leaky script")
    staff = as_user(facility.manager)
    body = _text(staff.get(reverse("api-tokens")))
    assert "Everyone else's live tokens" in body and "leaky script" in body
    staff.post(reverse("api-token-revoke", args=[theirs.pk]))
    theirs.refresh_from_db()
    assert theirs.revoked_by == facility.manager
    after = _text(staff.get(reverse("api-tokens")))
    assert "leaky script” of ben.researcher is revoked" in after
    assert "leaky script" not in after[after.index('id="others"') :]  # no longer live


def test_writes_are_post_only(as_user, facility):
    client = as_user(facility.researcher_a)
    token = _token_of(client, "x")
    assert client.get(reverse("api-token-create")).status_code == 405
    assert client.get(reverse("api-token-revoke", args=[token.pk])).status_code == 405
