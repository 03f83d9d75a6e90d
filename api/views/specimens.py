"""Specimens of your groups: to find one again and attach it to a new session."""

from __future__ import annotations

from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.utils import extend_schema, extend_schema_view
from rest_framework.filters import SearchFilter
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import Ordering, SpecimenFilter
from api.serializers.sessions import SpecimenOut
from api.views.base import ApiViewSet
from facility.logbook.models import Specimen
from facility.logbook.queries import specimens_visible_to


@extend_schema_view(
    list=extend_schema(summary="List specimens you may see", responses=SpecimenOut),
    retrieve=extend_schema(summary="Show one specimen", responses=SpecimenOut),
)
class SpecimenViewSet(ApiViewSet):
    """Specimens of your groups (yours and your groups'); staff see all."""

    queryset = Specimen.objects.none()
    filter_backends = [DjangoFilterBackend, SearchFilter, Ordering]
    filterset_class = SpecimenFilter
    search_fields = ["name", "material", "preparation", "notes"]
    ordering_fields = ["created_at", "id"]
    ordering = ("-created_at", "-id")

    def get_queryset(self):
        return specimens_visible_to(self.request.user).select_related("owner")

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), SpecimenOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(SpecimenOut, self.get_object()))
