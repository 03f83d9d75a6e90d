"""The one place errors become HTTP: `{"error": {"code", "message", "fields"}}`.

Domain errors (facility/errors.py) carry their own code and status; DRF's and Django's errors are
given stable codes here. Bad input never becomes a 500: whatever a client sends ends as a 4xx
with a message a person can act on.
"""

from __future__ import annotations

import logging
from typing import Any

from django.core.exceptions import (
    PermissionDenied as DjangoPermissionDenied,
)
from django.core.exceptions import (
    RequestDataTooBig,
    SuspiciousOperation,
)
from django.core.exceptions import (
    ValidationError as DjangoValidationError,
)
from django.db import IntegrityError
from django.http import Http404, UnreadablePostError
from rest_framework import exceptions, status
from rest_framework.response import Response
from rest_framework.views import set_rollback

from api.permissions import InsufficientScope
from facility.errors import DomainError

log = logging.getLogger(__name__)

# DRF's exceptions, by class, to our codes. The first match wins (subclasses first).
DRF_CODES: list[tuple[type[exceptions.APIException], str]] = [
    (InsufficientScope, "insufficient_scope"),
    (exceptions.ValidationError, "invalid"),
    (exceptions.ParseError, "malformed"),
    (exceptions.AuthenticationFailed, "unauthenticated"),
    (exceptions.NotAuthenticated, "unauthenticated"),
    (exceptions.PermissionDenied, "not_allowed"),
    (exceptions.NotFound, "not_found"),
    (exceptions.MethodNotAllowed, "method_not_allowed"),
    (exceptions.NotAcceptable, "not_acceptable"),
    (exceptions.UnsupportedMediaType, "unsupported_type"),
    (exceptions.Throttled, "throttled"),
]


def error_body(code: str, message: str, fields: dict[str, list[str]] | None = None) -> dict:
    return {"error": {"code": code, "message": message, "fields": fields or {}}}


def _flatten(detail: Any, prefix: str = "") -> dict[str, list[str]]:
    """DRF's nested error details as {"field": [...], "field.sub": [...], "items[2]": [...]}."""
    out: dict[str, list[str]] = {}
    if isinstance(detail, dict):
        for key, value in detail.items():
            name = f"{prefix}.{key}" if prefix else str(key)
            out.update(_flatten(value, name))
    elif isinstance(detail, list):
        if all(not isinstance(item, (dict, list)) for item in detail):
            out[prefix or "non_field_errors"] = [str(item) for item in detail]
        else:
            for index, item in enumerate(detail):
                if item:
                    out.update(_flatten(item, f"{prefix}[{index}]"))
    else:
        out[prefix or "non_field_errors"] = [str(detail)]
    return out


def _validation_message(fields: dict[str, list[str]]) -> str:
    general = fields.get("non_field_errors")
    if general and len(fields) == 1:
        return " ".join(general)
    named = [f"{name} ({' '.join(msgs)})" for name, msgs in fields.items()]
    return "Some input is not valid: " + "; ".join(named)


def _from_drf(exc: exceptions.APIException) -> Response:
    code = next((c for cls, c in DRF_CODES if isinstance(exc, cls)), "invalid")
    headers: dict[str, str] = {}
    if getattr(exc, "auth_header", None):
        headers["WWW-Authenticate"] = exc.auth_header
    if getattr(exc, "wait", None):
        headers["Retry-After"] = f"{int(exc.wait)}"
    if isinstance(exc, exceptions.ValidationError):
        fields = _flatten(exc.detail)
        body = error_body(code, _validation_message(fields), fields)
    else:
        body = error_body(code, str(exc.detail))
    return Response(body, status=exc.status_code, headers=headers)


def exception_handler(exc: Exception, context: dict) -> Response | None:
    """DRF's EXCEPTION_HANDLER: every error of the API in the same shape."""
    if isinstance(exc, DomainError):
        response = Response(error_body(exc.code, exc.message, exc.fields), status=exc.http_status)
        if exc.http_status == status.HTTP_401_UNAUTHORIZED:
            response["WWW-Authenticate"] = 'Bearer realm="api"'
    elif isinstance(exc, Http404):
        message = str(exc) if exc.args and exc.args[0] else "Not found, or not visible to you."
        response = Response(error_body("not_found", message), status=status.HTTP_404_NOT_FOUND)
    elif isinstance(exc, DjangoPermissionDenied):
        message = str(exc) or "You may not do this."
        response = Response(error_body("not_allowed", message), status=status.HTTP_403_FORBIDDEN)
    elif isinstance(exc, exceptions.APIException):
        response = _from_drf(exc)
    elif isinstance(exc, RequestDataTooBig):
        response = Response(
            error_body("too_large", "The request body is larger than this server accepts."),
            status=status.HTTP_413_REQUEST_ENTITY_TOO_LARGE,
        )
    elif isinstance(exc, (SuspiciousOperation, UnreadablePostError)):
        response = Response(
            error_body("malformed", f"The request could not be read: {exc}"),
            status=status.HTTP_400_BAD_REQUEST,
        )
    elif isinstance(exc, DjangoValidationError):
        fields = {
            name: [str(m) for m in msgs]
            for name, msgs in getattr(
                exc, "message_dict", {"non_field_errors": exc.messages}
            ).items()
        }
        response = Response(
            error_body("invalid", _validation_message(fields), fields),
            status=status.HTTP_400_BAD_REQUEST,
        )
    elif isinstance(exc, IntegrityError):
        # A database rule refused the change: the input clashes with stored data. Logged, since a
        # service should normally have refused it first with a clearer message.
        log.warning("integrity error reached the API: %s", exc)
        response = Response(
            error_body("conflict", "The change clashes with data already stored."),
            status=status.HTTP_409_CONFLICT,
        )
    else:
        return None  # a real fault: let it be a 500 and be logged
    set_rollback()
    return response
