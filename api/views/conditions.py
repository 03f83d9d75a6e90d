"""The conditions finder: what worked on similar specimens (issue 8), for scripts.

Thin: the input becomes the finder's criteria (`make_criteria`), `queries.search` does the work
with the finder's privacy rules, and this module only shapes the answer. Two API-side rules on
top: a hit's session id is given only with its other details (a hidden hit stays anonymous), and
a token bound to an instrument sees details of that instrument's sessions only.
"""

from __future__ import annotations

import dataclasses
from typing import Any

from django.shortcuts import get_object_or_404
from django.urls import reverse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api.permissions import token_of
from api.serializers.conditions import ConditionsSearchIn, ConditionsSearchOut
from api.views.base import ApiViewSet
from api.views.micrographs import FilesAnyway
from facility.finder.criteria import make_criteria
from facility.finder.queries import Hit, Result, micrographs_shown_to, search
from facility.logbook.downloads import thumbnail_response
from facility.logbook.models import InstrumentSession, Micrograph
from facility.logbook.queries import visible_to as sessions_visible_to

MICROGRAPH_ID = OpenApiParameter("micrograph_id", OpenApiTypes.INT, OpenApiParameter.PATH)
SEARCH_DESCRIPTION = (
    "Past sessions on similar specimens, ranked, with a summary of the settings that worked "
    "(median and range, counts) and of what failed. The summary draws on every session the "
    "facility lets count; a hit from another group shows its details and images only when that "
    "group shares them (never a commercial client's), otherwise only its conditions and outcome."
)


def _hidden(hit: Hit) -> Hit:
    """The hit as someone who may not see its details gets it."""
    return dataclasses.replace(
        hit,
        visible=False,
        date=None,
        instrument=None,
        specimen=None,
        material=None,
        operator=None,
        group=None,
        micrograph_ids=[],
    )


class ConditionsViewSet(ApiViewSet):
    """Search the logbook for the conditions that worked on similar specimens."""

    queryset = Micrograph.objects.none()
    query_actions = ("search",)
    read_actions = ("search",)
    instrument_path = "session__instrument_id"

    def _shown(self, result: Result) -> dict[str, Any]:
        """The result with the API's two extra rules applied, and links to what the caller may open."""
        hits = list(result.hits)
        visible = [h.session_id for h in hits if h.visible]
        token = token_of(self.request)
        if visible and token is not None and token.instrument_id:
            on_bound = set(
                InstrumentSession.objects.filter(
                    pk__in=visible, instrument_id=token.instrument_id
                ).values_list("pk", flat=True)
            )
            hits = [h if not h.visible or h.session_id in on_bound else _hidden(h) for h in hits]
            visible = [v for v in visible if v in on_bound]
        # Hits of sharing groups are shown, but their sessions belong to their own group.
        openable = (
            set(
                sessions_visible_to(self.request.user)
                .filter(pk__in=visible)
                .values_list("pk", flat=True)
            )
            if visible
            else set()
        )
        rows = []
        for hit in hits:
            row = dataclasses.asdict(hit)
            if not hit.visible:
                row["session_id"] = None
            row["session_url"] = (
                reverse("api:session-detail", args=[hit.session_id])
                if hit.session_id in openable
                else None
            )
            rows.append(row)
        return {
            "criteria": result.criteria,
            "summary": result.summary,
            "suggestion": result.suggestion,
            "hits": rows,
        }

    @extend_schema(
        methods=["GET"],
        summary="Find the conditions that worked for similar specimens",
        description=SEARCH_DESCRIPTION,
        parameters=[ConditionsSearchIn],
        responses=ConditionsSearchOut,
    )
    @extend_schema(
        methods=["POST"],
        summary="Find the conditions that worked for similar specimens (criteria as JSON)",
        description=SEARCH_DESCRIPTION + " The same search as GET; changes nothing.",
        request=ConditionsSearchIn,
        responses={200: ConditionsSearchOut},
    )
    @action(detail=False, methods=["get", "post"], pagination_class=None)
    def search(self, request: Request) -> Response:
        data = self.parse(
            ConditionsSearchIn, request.query_params if request.method == "GET" else None
        )
        limit = data.pop("limit")
        result = search(request.user, make_criteria(**data), limit=limit)
        return Response(self.out(ConditionsSearchOut, self._shown(result)))

    @extend_schema(
        summary="Download the thumbnail of a finder hit (PNG)",
        description="For the micrographs a search lists under a visible hit, including those of "
        "groups that share their details.",
        parameters=[MICROGRAPH_ID],
        responses={(200, "image/png"): OpenApiTypes.BINARY},
    )
    @action(
        detail=False,
        methods=["get"],
        url_path=r"thumbnails/(?P<micrograph_id>[0-9]+)",
        url_name="thumbnail",
        content_negotiation_class=FilesAnyway,
    )
    def thumbnail(self, request: Request, micrograph_id: str):
        shown = self.narrow(micrographs_shown_to(request.user))
        return thumbnail_response(get_object_or_404(shown, pk=int(micrograph_id)))
