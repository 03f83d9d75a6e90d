"""Rate limits on the two actions worth abusing: making tokens and uploading images.

Counted per token when a token is used (each acquisition PC has its own), otherwise per person.
Rates come from REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"] and are read on each request, so a
settings override (tests, a deployment) takes effect without a restart of the class.
"""

from __future__ import annotations

from rest_framework.settings import api_settings
from rest_framework.throttling import SimpleRateThrottle

from api.permissions import token_of


class _PerCallerThrottle(SimpleRateThrottle):
    def get_rate(self) -> str | None:
        return api_settings.DEFAULT_THROTTLE_RATES.get(self.scope)

    def get_cache_key(self, request, view) -> str | None:
        token = token_of(request)
        if token is not None:
            ident = f"token-{token.pk}"
        elif request.user and request.user.is_authenticated:
            ident = f"user-{request.user.pk}"
        else:
            ident = f"addr-{self.get_ident(request)}"
        return self.cache_format % {"scope": self.scope, "ident": ident}


class TokenCreationThrottle(_PerCallerThrottle):
    scope = "token_creation"


class UploadThrottle(_PerCallerThrottle):
    scope = "uploads"
