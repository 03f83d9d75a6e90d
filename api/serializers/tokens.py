"""API tokens as the token list shows them; the secret only once, in the creation answer."""

from __future__ import annotations

from rest_framework import serializers

from api.models import Scope, TokenKind
from api.tokens import DEFAULT_LIFETIME_DAYS, MAX_LIFETIME_DAYS


class TokenOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    name = serializers.CharField(read_only=True)
    kind = serializers.ChoiceField(choices=TokenKind.choices, read_only=True)
    owner = serializers.CharField(source="user.username", read_only=True)
    prefix = serializers.CharField(read_only=True, help_text="First characters of the secret.")
    scopes = serializers.ListField(child=serializers.ChoiceField(choices=Scope.choices))
    instrument = serializers.CharField(source="instrument.code", read_only=True, allow_null=True)
    created_at = serializers.DateTimeField(read_only=True)
    expires_at = serializers.DateTimeField(read_only=True)
    revoked_at = serializers.DateTimeField(read_only=True, allow_null=True)
    last_used_at = serializers.DateTimeField(read_only=True, allow_null=True)
    is_live = serializers.SerializerMethodField()

    def get_is_live(self, token) -> bool:
        return token.is_live()


class TokenCreatedOut(TokenOut):
    secret = serializers.CharField(read_only=True, help_text="Shown once; store it now.")


class TokenCreateIn(serializers.Serializer):
    name = serializers.CharField(max_length=80)
    scopes = serializers.ListField(
        child=serializers.ChoiceField(choices=Scope.choices),
        min_length=1,
        max_length=3,
        default=[Scope.READ.value],
    )
    expires_in_days = serializers.IntegerField(
        min_value=1, max_value=MAX_LIFETIME_DAYS, default=DEFAULT_LIFETIME_DAYS
    )
    instrument = serializers.SlugField(
        max_length=40, required=False, help_text="Bind the token to this instrument (code)."
    )
    instrument_pc = serializers.BooleanField(
        default=False,
        help_text="Staff only: an upload-only service token for the instrument's acquisition PC "
        "(needs `instrument`; scopes are ignored).",
    )

    def validate(self, data: dict) -> dict:
        if data["instrument_pc"] and not data.get("instrument"):
            raise serializers.ValidationError(
                {"instrument": ["An instrument-PC token needs an instrument."]}
            )
        return data
