"""OpenAPI details: the bearer-token scheme and the documented errors of every operation.

Every operation gets the error responses it can give, in the one error shape, so a client (and
schemathesis) can rely on the schema for 4xx answers as well as for successes.
"""

from __future__ import annotations

from drf_spectacular.extensions import OpenApiAuthenticationExtension
from drf_spectacular.openapi import AutoSchema
from drf_spectacular.plumbing import build_bearer_security_scheme_object
from rest_framework.permissions import SAFE_METHODS

from api.serializers.common import Error

ERROR_DESCRIPTIONS = {
    "400": "Invalid input: `fields` names what to fix.",
    "401": "No credentials, or an unknown, expired or revoked token.",
    "403": "Signed in, but not allowed: a rule refuses it or the token lacks the scope.",
    "404": "Not found, or not visible to you.",
    "409": "Conflicts with the current state (e.g. the time is already booked).",
    "413": "The file or request is larger than the server accepts.",
    "415": "Unsupported media type or file type (judged by content).",
    "429": "Too many requests; retry after the number of seconds in Retry-After.",
}


class TokenScheme(OpenApiAuthenticationExtension):
    target_class = "api.authentication.TokenAuthentication"
    name = "bearerAuth"

    def get_security_definition(self, auto_schema):
        return build_bearer_security_scheme_object(
            header_name="Authorization", token_prefix=self.target.keyword
        )


class ApiAutoSchema(AutoSchema):
    """AutoSchema that adds the error responses each kind of operation can give."""

    def error_statuses(self) -> list[str]:
        codes = ["401", "403", "404"]
        action = getattr(self.view, "action", None)
        has_body = self.method not in SAFE_METHODS
        changes = has_body and action not in getattr(self.view, "read_actions", ())
        if has_body or self._is_list_view() or action in getattr(self.view, "query_actions", ()):
            codes.append("400")
        if has_body:
            codes.append("415")
        if changes:
            codes.append("409")
        if action in getattr(self.view, "upload_actions", ()):
            codes.append("413")
        if action in getattr(self.view, "throttled_actions", {}):
            codes.append("429")
        return sorted(set(codes))

    def _get_response_bodies(self, direction="response"):
        responses = super()._get_response_bodies(direction)
        for code in self.error_statuses():
            if code not in responses:
                response = self._get_response_for_code(
                    Error, code, media_types=["application/json"], direction=direction
                )
                response["description"] = ERROR_DESCRIPTIONS[code]
                responses[code] = response
        return responses
