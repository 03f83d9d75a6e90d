"""Instruments: the catalogue with each one's state now, its busy times, and PC uploads."""

from __future__ import annotations

from drf_spectacular.utils import OpenApiResponse, extend_schema, extend_schema_view
from rest_framework.decorators import action
from rest_framework.parsers import MultiPartParser
from rest_framework.request import Request
from rest_framework.response import Response

from api.serializers.instruments import BusyQuery, BusySlotOut, InstrumentOut
from api.serializers.micrographs import MicrographOut, MicrographUploadIn
from api.throttling import UploadThrottle
from api.views import uploading
from api.views.base import ApiViewSet
from facility.bookings.queries import in_window
from facility.errors import Conflict
from facility.instruments.models import Instrument
from facility.logbook.instrument_state import instruments_visible_to
from facility.logbook.queries import visible_to as sessions_visible_to


@extend_schema_view(
    list=extend_schema(summary="List instruments and their state now", responses=InstrumentOut),
    retrieve=extend_schema(
        summary="Show one instrument and its state now", responses=InstrumentOut
    ),
)
class InstrumentViewSet(ApiViewSet):
    """The facility's instruments, each with its state now (free, booked, in session, out of service)."""

    queryset = Instrument.objects.none()
    lookup_field = "code"
    lookup_value_regex = "[^/]+"
    ordering = "code"
    instrument_path = "pk"
    upload_actions = ("upload",)
    throttled_actions = {"upload": [UploadThrottle]}
    query_actions = ("busy",)

    def get_queryset(self):
        return self.narrow(instruments_visible_to(self.request.user))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), InstrumentOut)

    def retrieve(self, request: Request, code: str) -> Response:
        return Response(self.out(InstrumentOut, self.get_object()))

    @extend_schema(
        summary="Busy times of an instrument in a window",
        description="Live bookings that overlap [window_start, window_end), without who holds "
        "them; `mine` marks your own.",
        parameters=[BusyQuery],
        responses=BusySlotOut(many=True),
    )
    @action(detail=True, methods=["get"], pagination_class=None)
    def busy(self, request: Request, code: str) -> Response:
        window = self.parse(BusyQuery, request.query_params)
        instrument = self.get_object()
        slots = in_window(instrument, window["window_start"], window["window_end"])
        return Response(self.out(BusySlotOut, slots.order_by("starts_at"), many=True))

    @extend_schema(
        summary="Upload a micrograph to the instrument's open session",
        description="For the acquisition PC: attaches the file to the session now open on this "
        "instrument. Same bytes again answer 200 with the existing micrograph.",
        request={"multipart/form-data": MicrographUploadIn},
        responses={
            201: OpenApiResponse(MicrographOut, description="A new micrograph."),
            200: OpenApiResponse(MicrographOut, description="These bytes were already uploaded."),
        },
    )
    @action(detail=True, methods=["post"], url_path="micrographs", parser_classes=[MultiPartParser])
    def upload(self, request: Request, code: str) -> Response:
        instrument = self.get_object()
        # `instrument` came through the token's binding, so the session is on the bound one.
        session = (
            sessions_visible_to(request.user)
            .filter(instrument=instrument, ended_at__isnull=True)
            .first()
        )
        if session is None:
            raise Conflict(
                f"{instrument.name} has no open session you can add images to; check in first."
            )
        return uploading.upload(self, request, session)
