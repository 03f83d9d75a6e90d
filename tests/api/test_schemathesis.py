"""Schemathesis against the generated OpenAPI schema: no 5xx, and every answer as documented.

Generated requests (valid and invalid) go in-process through the WSGI app, authenticated with a
token of researcher A that carries every scope, on the seeded world of two mirrored groups.
Checks: no server error, documented status code, content type, headers and response body
(schemathesis' own checks, against the OpenAPI 3 schema drf-spectacular publishes).
"""

from __future__ import annotations

import os

import pytest
import schemathesis
from django.core.wsgi import get_wsgi_application
from hypothesis import HealthCheck, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from api import tokens

CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_headers_conformance,
    response_schema_conformance,
]
DEEP = os.environ.get("BEAMLEDGER_SCHEMATHESIS_DEEP") == "1"
# Small on purpose: the whole API area must stay fast; each operation still sees valid and
# invalid inputs on every run (derandomized, so a failure reproduces).
MAX_EXAMPLES = 25 if DEEP else 4


@pytest.fixture(autouse=True)
def _keep_the_test_connection():
    """The WSGI app is called directly here, not through Django's test client, so Django's
    end-of-request handler would close the database connection — on PostgreSQL that is the
    connection holding the test's transaction. The test client disconnects the handler for the
    same reason; do the same."""
    from django.core.signals import request_finished, request_started
    from django.db import close_old_connections

    request_started.disconnect(close_old_connections)
    request_finished.disconnect(close_old_connections)
    yield
    request_started.connect(close_old_connections)
    request_finished.connect(close_old_connections)


@pytest.fixture
def bearer(world) -> dict[str, str]:
    issued = tokens.create_token(
        user=world.a.user, name="schemathesis", scopes=["read", "write", "upload"]
    )
    return {"Authorization": f"Bearer {issued.secret}"}


# Loaded through the app itself, as a client would; the schema view needs no database.
schema = schemathesis.openapi.from_wsgi("/api/v1/schema/", get_wsgi_application())
# The coverage phase (boundary values and unexpected methods for every parameter) triples the
# run; CI keeps to the fuzzing and examples phases. BEAMLEDGER_SCHEMATHESIS_DEEP=1 adds it (it
# passes too; run it after changing the API's inputs).
schema.config.phases.coverage.enabled = DEEP


@schema.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_api_conforms_to_its_schema(case, world, bearer):
    case.call_and_validate(headers=bearer, checks=CHECKS)


# Upkeep and billing's writes answer everyone but staff with a 403, so the run above never gets
# past the door there. The same checks as staff, on the facility's SEM (a generated instrument
# code would only meet 404s).
staff_only = schema.include(path_regex="^/api/v1/(upkeep|billing)/")


@pytest.fixture
def staff_bearer(world) -> dict[str, str]:
    issued = tokens.create_token(
        user=world.facility.manager, name="schemathesis staff", scopes=["read", "write"]
    )
    return {"Authorization": f"Bearer {issued.secret}"}


@staff_only.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_staff_areas_conform_as_staff(case, world, staff_bearer):
    if "code" in (case.path_parameters or {}):
        case.path_parameters["code"] = world.facility.sem.code
    case.call_and_validate(headers=staff_bearer, checks=CHECKS)
