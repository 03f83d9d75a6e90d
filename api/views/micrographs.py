"""Micrographs: list, detail, the original file, the thumbnail and the assessment."""

from __future__ import annotations

from django.http import FileResponse
from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import extend_schema, extend_schema_view
from rest_framework.decorators import action
from rest_framework.filters import SearchFilter
from rest_framework.negotiation import BaseContentNegotiation
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import MicrographFilter, Ordering
from api.serializers.micrographs import AssessmentOut, MicrographDetailOut, MicrographOut
from api.views.base import ApiViewSet
from facility.errors import NotFound
from facility.logbook.downloads import original_response, thumbnail_response
from facility.logbook.models import Micrograph
from facility.logbook.queries import micrographs_visible_to

IMAGE_TYPES = ("image/tiff", "image/png", "image/jpeg")


class FilesAnyway(BaseContentNegotiation):
    """Downloads answer with the file's own type whatever Accept says; errors stay JSON."""

    def select_parser(self, request, parsers):
        return parsers[0] if parsers else None

    def select_renderer(self, request, renderers, format_suffix=None):
        return renderers[0], renderers[0].media_type


@extend_schema_view(
    list=extend_schema(summary="List micrographs you may see", responses=MicrographOut),
    retrieve=extend_schema(summary="Show one micrograph", responses=MicrographDetailOut),
)
class MicrographViewSet(ApiViewSet):
    """Micrographs of the sessions you may see."""

    queryset = Micrograph.objects.none()
    filter_backends = [DjangoFilterBackend, SearchFilter, Ordering]
    filterset_class = MicrographFilter
    search_fields = ["original_name"]
    ordering_fields = ["uploaded_at", "size_bytes", "id"]
    ordering = ("-uploaded_at", "-id")
    instrument_path = "session__instrument_id"

    def get_queryset(self):
        return self.narrow(micrographs_visible_to(self.request.user).select_related("uploaded_by"))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), MicrographOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(MicrographDetailOut, self.get_object()))

    @extend_schema(
        summary="Download the original file",
        responses={(200, media): OpenApiTypes.BINARY for media in IMAGE_TYPES},
    )
    @action(detail=True, methods=["get"], content_negotiation_class=FilesAnyway)
    def original(self, request: Request, pk: str) -> FileResponse:
        return original_response(self.get_object())

    @extend_schema(
        summary="Download the thumbnail (PNG)",
        responses={(200, "image/png"): OpenApiTypes.BINARY},
    )
    @action(detail=True, methods=["get"], content_negotiation_class=FilesAnyway)
    def thumbnail(self, request: Request, pk: str) -> FileResponse:
        return thumbnail_response(self.get_object())

    @extend_schema(summary="Show the latest assessment of a micrograph", responses=AssessmentOut)
    @action(detail=True, methods=["get"], pagination_class=None)
    def assessment(self, request: Request, pk: str) -> Response:
        micrograph = self.get_object()
        latest = micrograph.assessments.order_by("-created_at", "-id").first()
        if latest is None:
            raise NotFound(
                f"Micrograph {micrograph.pk} has no assessment yet (analysis: {micrograph.state})."
            )
        return Response(self.out(AssessmentOut, latest))
