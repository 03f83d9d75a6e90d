"""Instrument sessions: check in and out, and log specimen, coating, conditions and images."""

from __future__ import annotations

from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import (
    OpenApiParameter,
    OpenApiResponse,
    extend_schema,
    extend_schema_view,
)
from rest_framework import status
from rest_framework.decorators import action
from rest_framework.filters import SearchFilter
from rest_framework.parsers import MultiPartParser
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import Ordering, SessionFilter
from api.serializers.micrographs import MicrographOut, MicrographUploadIn
from api.serializers.sessions import (
    CheckInIn,
    CheckOutIn,
    CoatingIn,
    CoatingOut,
    ConditionsIn,
    ConditionsOut,
    SessionDetailOut,
    SessionOut,
    SessionUpdateIn,
    SpecimenIn,
    SpecimenOut,
)
from api.throttling import UploadThrottle
from api.views import uploading
from api.views.base import ApiViewSet, idempotency_key, visible_or_404
from api.views.bookings import IDEMPOTENCY_PARAMETER
from api.views.people import accounts_visible_to, users_visible_to
from facility.bookings.queries import visible_to as bookings_visible_to
from facility.logbook import services
from facility.logbook.models import InstrumentSession
from facility.logbook.queries import specimens_visible_to, visible_to

CONDITIONS_ID = OpenApiParameter("conditions_id", OpenApiTypes.INT, OpenApiParameter.PATH)


@extend_schema_view(
    list=extend_schema(summary="List sessions you may see", responses=SessionOut),
    retrieve=extend_schema(
        summary="Show one session with its conditions", responses=SessionDetailOut
    ),
)
class SessionViewSet(ApiViewSet):
    """Instrument sessions (logbook entries): yours and your groups'; staff see all."""

    queryset = InstrumentSession.objects.none()
    filter_backends = [DjangoFilterBackend, SearchFilter, Ordering]
    filterset_class = SessionFilter
    search_fields = ["notes", "fault_report", "specimen__name", "specimen__material"]
    ordering_fields = ["started_at", "id"]
    ordering = ("-started_at", "-id")
    instrument_path = "instrument_id"
    upload_actions = ("upload",)
    throttled_actions = {"upload": [UploadThrottle]}

    def get_queryset(self):
        sessions = visible_to(self.request.user).select_related("specimen__owner")
        if self.action != "list":
            sessions = sessions.prefetch_related("conditions")
        return self.narrow(sessions)

    def session_answer(self, session) -> Response:
        return Response(self.out(SessionDetailOut, self.get_queryset().get(pk=session.pk)))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), SessionOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(SessionDetailOut, self.get_object()))

    @extend_schema(
        summary="Check in: open a session",
        description="From your booking that covers now (or the one given), or as a walk-up with "
        "an account when the instrument is free.",
        request=CheckInIn,
        responses={201: SessionDetailOut},
        parameters=[IDEMPOTENCY_PARAMETER],
    )
    def create(self, request: Request) -> Response:
        data = self.parse(CheckInIn)
        me = request.user
        found = {
            "instrument": visible_or_404(
                self.bound_instruments(), "instrument", "instrument", code=data["instrument"]
            )
        }
        if "booking" in data:
            found["booking"] = visible_or_404(
                self.narrow(bookings_visible_to(me)), "booking", "booking", pk=data["booking"]
            )
        if "account" in data:
            found["account"] = visible_or_404(
                accounts_visible_to(me), "account", "account", code=data["account"]
            )
        user = me
        if "operator" in data:
            user = visible_or_404(
                users_visible_to(me), "operator", "person", username=data["operator"]
            )
        session = services.check_in(
            user=user,
            by=me,
            purpose=data.get("purpose"),
            idempotency_key=idempotency_key(request),
            **found,
        )
        response = self.session_answer(session)
        response.status_code = status.HTTP_201_CREATED
        return response

    @extend_schema(
        summary="Change a session's vacuum mode, notes or fault report",
        request=SessionUpdateIn,
        responses=SessionDetailOut,
    )
    def partial_update(self, request: Request, pk: str) -> Response:
        data = self.parse(SessionUpdateIn)
        session = services.update_session(session=self.get_object(), by=request.user, **data)
        return self.session_answer(session)

    @extend_schema(
        summary="Check out: close a session", request=CheckOutIn, responses=SessionDetailOut
    )
    @action(detail=True, methods=["post"], url_path="check-out")
    def check_out(self, request: Request, pk: str) -> Response:
        data = self.parse(CheckOutIn)
        session = services.check_out(session=self.get_object(), by=request.user, **data)
        return self.session_answer(session)

    @extend_schema(
        summary="Log a set of beam and detector conditions",
        request=ConditionsIn,
        responses={201: ConditionsOut},
    )
    @action(detail=True, methods=["post"], url_path="conditions")
    def add_conditions(self, request: Request, pk: str) -> Response:
        data = self.parse(ConditionsIn)
        conditions = services.add_conditions(session=self.get_object(), by=request.user, **data)
        return Response(self.out(ConditionsOut, conditions), status=status.HTTP_201_CREATED)

    @extend_schema(
        summary="Correct a logged set of conditions",
        request=ConditionsIn,
        responses=ConditionsOut,
        parameters=[CONDITIONS_ID],
    )
    @action(
        detail=True,
        methods=["patch"],
        url_path=r"conditions/(?P<conditions_id>[0-9]+)",
        url_name="conditions-detail",
    )
    def update_conditions(self, request: Request, pk: str, conditions_id: str) -> Response:
        data = self.parse(ConditionsIn)
        session = self.get_object()
        conditions = visible_or_404(
            session.conditions.all(), "conditions_id", "conditions", pk=int(conditions_id)
        )
        conditions = services.update_conditions(conditions=conditions, by=request.user, **data)
        return Response(self.out(ConditionsOut, conditions))

    @extend_schema(
        summary="Record the session's specimen",
        description="Give `specimen` to attach one of your group's specimens (200), or describe "
        "a new one (201).",
        request=SpecimenIn,
        responses={
            201: OpenApiResponse(SpecimenOut, description="A new specimen was described."),
            200: OpenApiResponse(SpecimenOut, description="An existing specimen was attached."),
        },
    )
    @action(detail=True, methods=["post"], url_path="specimen")
    def specimen(self, request: Request, pk: str) -> Response:
        data = self.parse(SpecimenIn)
        session = self.get_object()
        if "specimen" in data:
            existing = visible_or_404(
                specimens_visible_to(request.user), "specimen", "specimen", pk=data["specimen"]
            )
            specimen = services.record_specimen(session=session, by=request.user, specimen=existing)
            return Response(self.out(SpecimenOut, specimen))
        specimen = services.record_specimen(session=session, by=request.user, **data)
        return Response(self.out(SpecimenOut, specimen), status=status.HTTP_201_CREATED)

    @extend_schema(
        summary="Record the coating on the session's specimen",
        request=CoatingIn,
        responses={201: CoatingOut},
    )
    @action(detail=True, methods=["post"], url_path="coating")
    def coating(self, request: Request, pk: str) -> Response:
        data = self.parse(CoatingIn)
        coating = services.set_coating(session=self.get_object(), by=request.user, **data)
        return Response(self.out(CoatingOut, coating), status=status.HTTP_201_CREATED)

    @extend_schema(
        summary="Upload a micrograph to a session",
        description="Multipart: the file and, optionally, the conditions logged for it. The same "
        "bytes again answer 200 with the existing micrograph instead of a duplicate.",
        request={"multipart/form-data": MicrographUploadIn},
        responses={
            201: OpenApiResponse(MicrographOut, description="A new micrograph."),
            200: OpenApiResponse(MicrographOut, description="These bytes were already uploaded."),
        },
    )
    @action(detail=True, methods=["post"], url_path="micrographs", parser_classes=[MultiPartParser])
    def upload(self, request: Request, pk: str) -> Response:
        return uploading.upload(self, request, self.get_object())
