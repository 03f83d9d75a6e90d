"""Domain errors: what a service raises when a rule refuses an action.

Each carries a message a person can act on. They map to HTTP in one place (api/errors.py) and to form
errors on the pages; commands print them as one line on stderr.
"""

from __future__ import annotations


class DomainError(Exception):
    """Base class. `code` is stable for scripts; `message` is for people."""

    code = "invalid"
    http_status = 400

    def __init__(self, message: str, *, fields: dict[str, list[str]] | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.fields = fields or {}


class Invalid(DomainError):
    """The input breaks a rule (wrong dates, an impossible value)."""

    code = "invalid"
    http_status = 400


class NotAllowed(DomainError):
    """The person may not do this (not their booking, not staff)."""

    code = "not_allowed"
    http_status = 403


class NotTrained(NotAllowed):
    """No valid training record at the level the action needs."""

    code = "not_trained"


class NotFound(DomainError):
    """The object does not exist or is not visible to this person."""

    code = "not_found"
    http_status = 404


class Conflict(DomainError):
    """The action clashes with the current state (an overlapping booking, an open session)."""

    code = "conflict"
    http_status = 409


class Closed(Conflict):
    """The object is closed to changes (a finalised statement, a closed session)."""

    code = "closed"


class TooLarge(DomainError):
    code = "too_large"
    http_status = 413


class UnsupportedType(DomainError):
    code = "unsupported_type"
    http_status = 415
