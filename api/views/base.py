"""What every API view shares: scope checks, the instrument binding of tokens, input parsing."""

from __future__ import annotations

from typing import Any

from django.db.models import Model, QuerySet
from rest_framework import serializers, viewsets
from rest_framework.generics import get_object_or_404

from api.permissions import HasScope, token_of
from facility.errors import Invalid, NotFound
from facility.logbook.instrument_state import instruments_visible_to


class ApiViewSet(viewsets.GenericViewSet):
    """A viewset whose rows come from an app's `visible_to`, narrowed by a token's instrument."""

    permission_classes = [HasScope]
    # Actions that need the `upload` scope (and get the upload throttle and 413 in the schema).
    upload_actions: tuple[str, ...] = ()
    # Throttle classes by action; other actions are not throttled.
    throttled_actions: dict[str, list[type]] = {}
    # Actions that read query parameters through a serializer (so may answer 400).
    query_actions: tuple[str, ...] = ()
    # Actions that change nothing even when POSTed (a search with a JSON body): `read` scope,
    # and no 409 in the schema.
    read_actions: tuple[str, ...] = ()
    # The path from the listed model to its instrument's id, for instrument-bound tokens.
    instrument_path: str | None = None

    def get_throttles(self):
        return [throttle() for throttle in self.throttled_actions.get(self.action, [])]

    def narrow(self, queryset: QuerySet) -> QuerySet:
        """Keep only the token's instrument when the request uses an instrument-bound token."""
        token = token_of(self.request)
        if token is not None and token.instrument_id and self.instrument_path:
            return queryset.filter(**{self.instrument_path: token.instrument_id})
        return queryset

    def bound_instruments(self) -> QuerySet:
        """Instruments the caller may name in a write (a bound token: only its own)."""
        instruments = instruments_visible_to(self.request.user)
        token = token_of(self.request)
        if token is not None and token.instrument_id:
            instruments = instruments.filter(pk=token.instrument_id)
        return instruments

    def get_object(self) -> Model:
        # Not filter_queryset(): query parameters must not change which object a URL names.
        lookup = self.lookup_url_kwarg or self.lookup_field
        return get_object_or_404(self.get_queryset(), **{self.lookup_field: self.kwargs[lookup]})

    def parse(
        self, serializer_class: type[serializers.Serializer], data: Any = None
    ) -> dict[str, Any]:
        """Validated input, or a 400 naming the fields."""
        serializer = serializer_class(
            data=self.request.data if data is None else data, context=self.get_serializer_context()
        )
        serializer.is_valid(raise_exception=True)
        return dict(serializer.validated_data)

    def out(self, serializer_class: type[serializers.Serializer], obj: Any, **kwargs: Any) -> Any:
        return serializer_class(obj, context=self.get_serializer_context(), **kwargs).data

    def page(self, queryset: QuerySet, serializer_class: type[serializers.Serializer]):
        rows = self.paginate_queryset(self.filter_queryset(queryset))
        return self.get_paginated_response(self.out(serializer_class, rows, many=True))


def visible_or_404(queryset: QuerySet, field: str, label: str, **lookup: Any) -> Model:
    """A related object named in a write, looked up only among those the caller may see.

    A 404 names the field, so a script knows which id to fix; it does not say whether the object
    exists outside the caller's scope.
    """
    found = queryset.filter(**lookup).first()
    if found is None:
        value = next(iter(lookup.values()))
        raise NotFound(f"No {label} {value!r} is visible to you.", fields={field: ["Not found."]})
    return found


IDEMPOTENCY_HEADER = "Idempotency-Key"


def idempotency_key(request) -> str:
    """The client's Idempotency-Key header ('' when absent): 1–80 visible ASCII characters."""
    raw = request.headers.get(IDEMPOTENCY_HEADER, "")
    if raw == "":
        return ""
    if len(raw) > 80 or not all(33 <= ord(ch) <= 126 for ch in raw):
        raise Invalid(
            "The Idempotency-Key header must be 1 to 80 visible ASCII characters (a UUID will do).",
            fields={IDEMPOTENCY_HEADER: ["1–80 visible ASCII characters."]},
        )
    return raw
