"""DRF authentication: `Authorization: Bearer <token>` for scripts, the session for the pages."""

from __future__ import annotations

from django.utils.translation import gettext_lazy as _
from rest_framework import authentication, exceptions
from rest_framework.request import Request

from api import tokens
from api.models import ApiToken


class TokenAuthentication(authentication.BaseAuthentication):
    """Reads a Beamledger API token from the Authorization header.

    `request.user` becomes the token's owner and `request.auth` the ApiToken, whose scopes and
    instrument binding the permission classes and views then apply.
    """

    keyword = "Bearer"

    def authenticate(self, request: Request) -> tuple[object, ApiToken] | None:
        header = authentication.get_authorization_header(request).split()
        if not header or header[0].lower() != self.keyword.lower().encode():
            return None
        if len(header) != 2:
            raise exceptions.AuthenticationFailed(
                _("Send the token as 'Authorization: Bearer <token>', with no spaces in it.")
            )
        try:
            secret = header[1].decode("ascii")
        except UnicodeDecodeError:
            raise exceptions.AuthenticationFailed(
                _("The token holds characters no token has.")
            ) from None
        try:
            token = tokens.authenticate(secret)
        except tokens.TokenRejected as exc:
            raise exceptions.AuthenticationFailed(exc.message) from None
        return token.user, token

    def authenticate_header(self, request: Request) -> str:
        # Makes DRF answer 401 (not 403) to a request without credentials.
        return f'{self.keyword} realm="api"'
