"""The API's endpoints as the URL resolver and the OpenAPI schema list them."""

from __future__ import annotations

import re

from django.urls import URLPattern, URLResolver, get_resolver
from django.urls.resolvers import RoutePattern
from drf_spectacular.generators import SchemaGenerator

PREFIX = "/api/v1/"
METHODS = ("get", "post", "put", "patch", "delete")
# Resolver patterns that are not endpoints of their own (the JSON 404, a slash redirect).
NOT_ENDPOINTS = {"not-found", "conditions-search-no-slash"}


def _template(pattern: URLPattern) -> str:
    """The schema's form of a URL pattern: /api/v1/sessions/{id}/check-out/."""

    def name(match: re.Match) -> str:
        return "{" + ("id" if match[1] == "pk" else match[1]) + "}"

    if isinstance(pattern.pattern, RoutePattern):
        text = re.sub(r"<(?:\w+:)?(\w+)>", name, str(pattern.pattern))
    else:
        text = pattern.pattern.regex.pattern.lstrip("^").rstrip("$").replace("\\.", ".")
        text = re.sub(r"\(\?P<(\w+)>[^)]*\)", name, text)
    return PREFIX + text


def _methods(callback) -> list[str]:
    actions = getattr(callback, "actions", None)
    if actions:
        # DRF adds `head` to a viewset's actions on first use; HEAD is GET without a body.
        return sorted(m.upper() for m in actions if m in METHODS)
    view = getattr(callback, "view_class", None) or getattr(callback, "cls", None)
    return sorted(m.upper() for m in METHODS if view is not None and hasattr(view, m))


def resolver_endpoints() -> set[tuple[str, str]]:
    """(METHOD, path template) of every URL under /api/v1/, from the URL configuration."""
    api = next(
        p
        for p in get_resolver().url_patterns
        if isinstance(p, URLResolver) and str(p.pattern) == PREFIX.lstrip("/")
    )
    found = set()
    for pattern in api.url_patterns:
        assert isinstance(pattern, URLPattern), pattern
        if pattern.name in NOT_ENDPOINTS:
            continue
        path = _template(pattern)
        for method in _methods(pattern.callback):
            found.add((method, path))
    return found


def schema() -> dict:
    return SchemaGenerator().get_schema(request=None, public=True)


def schema_operations(spec: dict | None = None) -> dict[tuple[str, str], dict]:
    spec = spec or schema()
    return {
        (method.upper(), path): operation
        for path, item in spec["paths"].items()
        for method, operation in item.items()
        if method in METHODS
    }


def list_operations(spec: dict | None = None) -> list[str]:
    """Paths of the paginated list endpoints (GET, no path parameter, `results` in the answer)."""
    spec = spec or schema()
    out = []
    for (method, path), op in schema_operations(spec).items():
        if method != "GET" or "{" in path:
            continue
        ref = op["responses"]["200"]["content"]["application/json"]["schema"].get("$ref", "")
        component = spec["components"]["schemas"].get(ref.rsplit("/", 1)[-1], {})
        if "results" in component.get("properties", {}):
            out.append(path)
    return sorted(out)
