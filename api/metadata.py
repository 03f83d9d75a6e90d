"""What OPTIONS answers: the endpoint's name and where its full description lives.

DRF's default metadata inspects a view's serializer; these views choose their input serializer per
action, so the OpenAPI schema is the one description of the inputs.
"""

from __future__ import annotations

from django.urls import reverse
from rest_framework.metadata import BaseMetadata


class PointToSchema(BaseMetadata):
    def determine_metadata(self, request, view) -> dict:
        return {
            "name": view.get_view_name(),
            "description": view.get_view_description(),
            "schema": reverse("api:schema"),
            "docs": reverse("api:api-docs"),
        }
