"""The OpenAPI schema: valid without warnings, and complete for every operation."""

from __future__ import annotations

import re

from django.conf import settings
from django.contrib.staticfiles import finders
from django.core.management import call_command

from tests.api.endpoints import schema, schema_operations

UPLOADS = {
    ("POST", "/api/v1/sessions/{id}/micrographs/"),
    ("POST", "/api/v1/instruments/{code}/micrographs/"),
}
THROTTLED = UPLOADS | {("POST", "/api/v1/tokens/")}
# POSTs that change nothing (a search with a JSON body): no conflict to document.
READ_POSTS = {("POST", "/api/v1/conditions/search/")}


def test_schema_validates_and_has_no_warnings(tmp_path):
    # drf-spectacular validates against the OpenAPI 3.0 JSON Schema; warnings fail the command.
    call_command("spectacular", "--validate", "--fail-on-warn", "--file", str(tmp_path / "s.yaml"))
    assert (tmp_path / "s.yaml").stat().st_size > 10_000


def test_every_operation_is_documented():
    spec = schema()
    assert set(spec["components"]["securitySchemes"]) == {"bearerAuth", "cookieAuth"}
    for (method, path), op in schema_operations(spec).items():
        where = f"{method} {path}"
        assert op.get("summary"), where
        assert {"bearerAuth": []} in op["security"], where
        codes = set(op["responses"])
        assert {"401", "403", "404"} <= codes, where
        assert any(c.startswith("2") for c in codes), where
        if (method, path) in READ_POSTS:
            assert {"400", "415"} <= codes and "409" not in codes, where
        elif method != "GET":
            assert {"400", "409", "415"} <= codes, where
        if (method, path) in UPLOADS:
            assert {"413", "429"} <= codes and "multipart/form-data" in op["requestBody"]["content"]
        if (method, path) in THROTTLED:
            assert "429" in codes, where
        for code, response in op["responses"].items():
            for media in response.get("content", {}).values():
                assert media["schema"], (where, code)
                if code[0] in "45":
                    assert media["schema"]["$ref"].endswith("/Error"), (where, code)


def test_the_docs_page_needs_no_internet(client):
    """Swagger UI comes from the installed drf-spectacular-sidecar, not from a CDN, so the page
    works on a facility network without internet."""
    page = client.get("/api/v1/docs/")
    assert page.status_code == 200
    assets = re.findall(r'(?:src|href)="([^"]+)"', page.content.decode())
    assert any(a.endswith("swagger-ui-bundle.js") for a in assets), assets
    for asset in assets:
        assert asset.startswith(settings.STATIC_URL), asset
        # Each is a file the static-files finders serve from the installed package.
        assert finders.find(asset.removeprefix(settings.STATIC_URL)), asset
