"""Flags: list the findings on sessions you may see, and dismiss one with a reason."""

from __future__ import annotations

from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.utils import extend_schema, extend_schema_view
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import FlagFilter, Ordering
from api.serializers.flags import DismissIn, FlagOut
from api.views.base import ApiViewSet
from facility.logbook import flags
from facility.logbook.models import Flag
from facility.logbook.queries import flags_visible_to


@extend_schema_view(
    list=extend_schema(summary="List flags on sessions you may see", responses=FlagOut),
    retrieve=extend_schema(
        summary="Show one flag with its evidence and remedies", responses=FlagOut
    ),
)
class FlagViewSet(ApiViewSet):
    """Findings on the sessions you may see, with evidence and what to change."""

    queryset = Flag.objects.none()
    filter_backends = [DjangoFilterBackend, Ordering]
    filterset_class = FlagFilter
    ordering_fields = ["id"]
    ordering = ("-id",)
    instrument_path = "session__instrument_id"

    def get_queryset(self):
        return self.narrow(flags_visible_to(self.request.user).select_related("dismissed_by"))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), FlagOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(FlagOut, self.get_object()))

    @extend_schema(
        summary="Dismiss a flag, saying why it does not apply",
        request=DismissIn,
        responses=FlagOut,
    )
    @action(detail=True, methods=["post"])
    def dismiss(self, request: Request, pk: str) -> Response:
        data = self.parse(DismissIn)
        flag = flags.dismiss(flag=self.get_object(), by=request.user, reason=data["reason"])
        return Response(self.out(FlagOut, flag))
