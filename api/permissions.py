"""Who may call what: signed in, and — for a token — holding the scope the action needs.

Which rows a person reaches is not decided here but by each app's `visible_to`; these classes only
say whether the request may try at all.
"""

from __future__ import annotations

from rest_framework import permissions
from rest_framework.exceptions import PermissionDenied
from rest_framework.request import Request

from api.models import ApiToken, Scope, TokenKind


class InsufficientScope(PermissionDenied):
    # The error name RFC 6750 §3.1 gives a bearer token that lacks the scope a request needs.
    default_code = "insufficient_scope"


def token_of(request: Request) -> ApiToken | None:
    return request.auth if isinstance(request.auth, ApiToken) else None


def scope_for(request: Request, view) -> str:
    """The scope an action needs: upload actions `upload`, reads (and read-only POSTs) `read`,
    other writes `write`."""
    action = getattr(view, "action", None)
    if action in getattr(view, "upload_actions", ()):
        return Scope.UPLOAD
    # A search sent as POST (a long query in a JSON body) changes nothing: reading suffices.
    if request.method in permissions.SAFE_METHODS or action in getattr(view, "read_actions", ()):
        return Scope.READ
    return Scope.WRITE


class HasScope(permissions.BasePermission):
    """Signed in; a session may do everything its user may, a token only what its scopes say."""

    def has_permission(self, request: Request, view) -> bool:
        if not (request.user and request.user.is_authenticated):
            return False
        token = token_of(request)
        if token is None:
            return True
        needed = scope_for(request, view)
        if token.kind == TokenKind.INSTRUMENT and needed != Scope.UPLOAD:
            raise InsufficientScope("An instrument-PC token can only upload micrographs.")
        if not token.allows(needed):
            raise InsufficientScope(
                f"This token lacks the '{needed}' scope; make a token that has it."
            )
        return True


class SignedInPerson(permissions.BasePermission):
    """Token management needs the person's own login session: a token cannot mint tokens."""

    message = "Manage tokens while signed in (session), not with a token."

    def has_permission(self, request: Request, view) -> bool:
        if not (request.user and request.user.is_authenticated):
            return False
        return token_of(request) is None
