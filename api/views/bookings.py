"""Bookings: list by instrument and time window, book (idempotent), move, cancel, confirm."""

from __future__ import annotations

from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema, extend_schema_view
from rest_framework import status
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import BookingFilter, Ordering
from api.serializers.bookings import BookingCreateIn, BookingMoveIn, BookingOut
from api.views.base import IDEMPOTENCY_HEADER, ApiViewSet, idempotency_key, visible_or_404
from api.views.people import accounts_visible_to, users_visible_to
from facility.bookings import services
from facility.bookings.models import Booking
from facility.bookings.queries import visible_to

IDEMPOTENCY_PARAMETER = OpenApiParameter(
    IDEMPOTENCY_HEADER,
    OpenApiTypes.STR,
    OpenApiParameter.HEADER,
    description="Any unique string (a UUID): repeating the request with the same key returns the "
    "first result instead of acting twice.",
)


@extend_schema_view(
    list=extend_schema(summary="List bookings you may see", responses=BookingOut),
    retrieve=extend_schema(summary="Show one booking", responses=BookingOut),
)
class BookingViewSet(ApiViewSet):
    """Bookings: yours and your groups'; staff see all."""

    queryset = Booking.objects.none()
    filter_backends = [DjangoFilterBackend, Ordering]
    filterset_class = BookingFilter
    ordering_fields = ["starts_at", "created_at", "id"]
    ordering = ("-starts_at", "-id")
    instrument_path = "instrument_id"

    def get_queryset(self):
        return self.narrow(visible_to(self.request.user))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), BookingOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(BookingOut, self.get_object()))

    @extend_schema(
        summary="Book an instrument",
        description="Books [starts_at, ends_at) on one of your group's accounts, under the "
        "facility's rules (training, hours, length, account validity). A clash answers 409 "
        "without naming who holds the time.",
        request=BookingCreateIn,
        responses={201: BookingOut},
        parameters=[IDEMPOTENCY_PARAMETER],
    )
    def create(self, request: Request) -> Response:
        data = self.parse(BookingCreateIn)
        me = request.user
        instrument = visible_or_404(
            self.bound_instruments(), "instrument", "instrument", code=data["instrument"]
        )
        account = visible_or_404(
            accounts_visible_to(me), "account", "account", code=data["account"]
        )
        user = me
        if "user" in data:
            user = visible_or_404(users_visible_to(me), "user", "person", username=data["user"])
        booking = services.book(
            user=user,
            instrument=instrument,
            account=account,
            starts_at=data["starts_at"],
            ends_at=data["ends_at"],
            purpose=data["purpose"],
            note=data["note"],
            by=me,
            override_hours=data["override_hours"],
            idempotency_key=idempotency_key(request),
        )
        return Response(self.out(BookingOut, booking), status=status.HTTP_201_CREATED)

    @extend_schema(summary="Move a booking", request=BookingMoveIn, responses=BookingOut)
    @action(detail=True, methods=["post"])
    def move(self, request: Request, pk: str) -> Response:
        data = self.parse(BookingMoveIn)
        booking = services.move(booking=self.get_object(), by=request.user, **data)
        return Response(self.out(BookingOut, booking))

    @extend_schema(
        summary="Cancel a booking",
        description="Before the instrument's deadline it is cancelled; after it, cancelled late "
        "(which billing may charge).",
        request=None,
        responses=BookingOut,
    )
    @action(detail=True, methods=["post"])
    def cancel(self, request: Request, pk: str) -> Response:
        booking = services.cancel(booking=self.get_object(), by=request.user)
        return Response(self.out(BookingOut, booking))

    @extend_schema(
        summary="Confirm a requested booking (staff)", request=None, responses=BookingOut
    )
    @action(detail=True, methods=["post"])
    def confirm(self, request: Request, pk: str) -> Response:
        booking = services.confirm(booking=self.get_object(), by=request.user)
        return Response(self.out(BookingOut, booking))

    @extend_schema(summary="Record a no-show (staff)", request=None, responses=BookingOut)
    @action(detail=True, methods=["post"], url_path="no-show")
    def no_show(self, request: Request, pk: str) -> Response:
        booking = services.mark_no_show(booking=self.get_object(), by=request.user)
        return Response(self.out(BookingOut, booking))
