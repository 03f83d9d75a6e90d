"""Token management for scripts' owners: list, make and revoke API tokens (signed in only)."""

from __future__ import annotations

from drf_spectacular.utils import extend_schema, extend_schema_view
from rest_framework import status
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api import tokens
from api.models import ApiToken
from api.permissions import SignedInPerson
from api.serializers.tokens import TokenCreatedOut, TokenCreateIn, TokenOut
from api.throttling import TokenCreationThrottle
from api.views.base import ApiViewSet, visible_or_404


@extend_schema_view(
    list=extend_schema(summary="List your API tokens", responses=TokenOut),
)
class TokenViewSet(ApiViewSet):
    """Your API tokens; staff see every token. Needs the login session, not a token."""

    queryset = ApiToken.objects.none()
    permission_classes = [SignedInPerson]
    throttled_actions = {"create": [TokenCreationThrottle]}
    ordering = ("-created_at", "-id")

    def get_queryset(self):
        return tokens.tokens_visible_to(self.request.user)

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), TokenOut)

    @extend_schema(
        summary="Make an API token",
        description="The answer holds the secret once; only its digest is stored. Staff can make "
        "an upload-only token for an instrument's acquisition PC with `instrument_pc`.",
        request=TokenCreateIn,
        responses={201: TokenCreatedOut},
    )
    def create(self, request: Request) -> Response:
        data = self.parse(TokenCreateIn)
        instrument = None
        if data.get("instrument"):
            instrument = visible_or_404(
                self.bound_instruments(), "instrument", "instrument", code=data["instrument"]
            )
        if data["instrument_pc"]:
            issued = tokens.create_instrument_token(
                instrument=instrument,
                name=data["name"],
                by=request.user,
                expires_in_days=data["expires_in_days"],
            )
        else:
            issued = tokens.create_token(
                user=request.user,
                name=data["name"],
                scopes=data["scopes"],
                expires_in_days=data["expires_in_days"],
                instrument=instrument,
            )
        body = self.out(TokenOut, issued.token) | {"secret": issued.secret}
        return Response(body, status=status.HTTP_201_CREATED)

    @extend_schema(summary="Revoke an API token", request=None, responses=TokenOut)
    @action(detail=True, methods=["post"])
    def revoke(self, request: Request, pk: str) -> Response:
        token = tokens.revoke_token(token=self.get_object(), by=request.user)
        return Response(self.out(TokenOut, token))
