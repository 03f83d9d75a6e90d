"""Upkeep for staff scripts: counters, service events, meter readings, limits and alerts.

Upkeep is staff business: every action first asks `upkeep.queries.may_view`, so anyone else gets
a 403 whatever the URL names (an instrument code is no secret; the records are). Reads call the
upkeep queries, writes the upkeep services, which write the change history with their author.
"""

from __future__ import annotations

from typing import Any

from django.shortcuts import get_object_or_404
from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema, extend_schema_view
from rest_framework import status
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import AlertFilter
from api.serializers.upkeep import (
    AlertOut,
    InstrumentCountersOut,
    LimitIn,
    LimitOut,
    MeterReadingIn,
    MeterReadingOut,
    ServiceEventIn,
    ServiceEventOut,
    WindowQuery,
)
from api.views.base import ApiViewSet, visible_or_404
from facility.instruments.models import Instrument, Pump
from facility.upkeep import queries, services
from facility.upkeep.models import Alert, Limit, MeterReading, ServiceEvent

CODE = OpenApiParameter("code", OpenApiTypes.STR, OpenApiParameter.PATH, description="Instrument.")


class StaffOnly(ApiViewSet):
    """A viewset of upkeep: staff only (403 otherwise), after authentication and token scope."""

    def initial(self, request: Request, *args: Any, **kwargs: Any) -> None:
        super().initial(request, *args, **kwargs)
        queries.may_view(request.user)


class OfInstrument(StaffOnly):
    """Rows of the instrument named in the URL (a bound token reaches only its own)."""

    def instrument(self) -> Instrument:
        return get_object_or_404(self.bound_instruments(), code=self.kwargs["code"])

    def pump(self, data: dict[str, Any]) -> Pump | None:
        """The pump a write names: any of the reachable instruments' pumps, so that the upkeep
        rules can say plainly when it belongs to another instrument."""
        if data.get("pump") is None:
            return None
        pumps = Pump.objects.filter(instrument__in=self.bound_instruments())
        return visible_or_404(pumps, "pump", "pump", pk=data["pump"])


@extend_schema_view(
    counters=extend_schema(
        summary="Counters of an instrument against their limits",
        description="Emitter hours, pump hours and wear parts' vent cycles, derived from the "
        "logbook and corrected by meter readings, each with its rating, recent rates of use "
        "and the forecast date of reaching the rating.",
        responses=InstrumentCountersOut,
    )
)
class UpkeepInstrumentViewSet(StaffOnly):
    """An instrument's upkeep counters."""

    queryset = Instrument.objects.none()
    lookup_field = "code"
    lookup_value_regex = "[^/]+"
    instrument_path = "pk"

    def get_queryset(self):
        return self.narrow(self.bound_instruments())

    @action(detail=True, methods=["get"], pagination_class=None)
    def counters(self, request: Request, code: str) -> Response:
        instrument = self.get_object()
        body = {
            "instrument": instrument.code,
            "name": instrument.name,
            "counters": [s.as_dict() for s in queries.instrument_status(instrument)],
        }
        return Response(self.out(InstrumentCountersOut, body))


@extend_schema_view(
    list=extend_schema(
        summary="List an instrument's service events",
        parameters=[CODE, WindowQuery],
        responses=ServiceEventOut,
    ),
    create=extend_schema(
        summary="Record a service event",
        description="An emitter change, pump service or replacement, or wear-part replacement "
        "starts that counter again from `performed_at` and closes its alerts.",
        parameters=[CODE],
        request=ServiceEventIn,
        responses={201: ServiceEventOut},
    ),
)
class ServiceEventViewSet(OfInstrument):
    queryset = ServiceEvent.objects.none()
    ordering = ("-performed_at", "-id")

    def list(self, request: Request, code: str) -> Response:
        window = self.parse(WindowQuery, request.query_params)
        events = queries.service_events(self.instrument(), **window).select_related("instrument")
        return self.page(events, ServiceEventOut)

    def create(self, request: Request, code: str) -> Response:
        data = self.parse(ServiceEventIn)
        instrument = self.instrument()
        event = services.record_service_event(
            instrument=instrument,
            kind=data["kind"],
            performed_at=data["performed_at"],
            by=request.user,
            pump=self.pump(data),
            part=data.get("part", ""),
            performed_by=data.get("performed_by", ""),
            notes=data.get("notes", ""),
            cost=data.get("cost"),
        )
        return Response(self.out(ServiceEventOut, event), status=status.HTTP_201_CREATED)


@extend_schema_view(
    list=extend_schema(
        summary="List an instrument's meter readings",
        parameters=[CODE, WindowQuery],
        responses=MeterReadingOut,
    ),
    create=extend_schema(
        summary="Record what an hour meter showed",
        description="From `read_at` on, the reading wins over the counter derived from the "
        "logbook; the difference is the drift.",
        parameters=[CODE],
        request=MeterReadingIn,
        responses={201: MeterReadingOut},
    ),
)
class MeterReadingViewSet(OfInstrument):
    queryset = MeterReading.objects.none()
    ordering = ("-read_at", "-id")

    def list(self, request: Request, code: str) -> Response:
        window = self.parse(WindowQuery, request.query_params)
        readings = queries.meter_readings(self.instrument(), **window).select_related("instrument")
        return self.page(readings, MeterReadingOut)

    def create(self, request: Request, code: str) -> Response:
        data = self.parse(MeterReadingIn)
        reading = services.record_meter_reading(
            instrument=self.instrument(),
            counter=data["counter"],
            value=data["value"],
            read_at=data["read_at"],
            by=request.user,
            pump=self.pump(data),
            note=data.get("note", ""),
        )
        return Response(self.out(MeterReadingOut, reading), status=status.HTTP_201_CREATED)


@extend_schema_view(
    list=extend_schema(
        summary="List the limits set for an instrument",
        description="Ratings the facility set; a counter without one uses its default "
        "(shown in the counters).",
        parameters=[CODE],
        responses=LimitOut,
    ),
    create=extend_schema(
        summary="Set or change the limit of one counter",
        description="Replaces the default or the earlier rating of the counter named by "
        "`counter`, `pump` and `part`; answers the limit now in force.",
        parameters=[CODE],
        request=LimitIn,
        responses={200: LimitOut},
    ),
)
class LimitViewSet(OfInstrument):
    queryset = Limit.objects.none()
    ordering = ("id",)

    def list(self, request: Request, code: str) -> Response:
        limits = queries.limits_of(self.instrument()).select_related("instrument")
        return self.page(limits, LimitOut)

    def create(self, request: Request, code: str) -> Response:
        data = self.parse(LimitIn)
        limit = services.set_limit(
            instrument=self.instrument(),
            counter=data["counter"],
            rated=data["rated"],
            by=request.user,
            pump=self.pump(data),
            part=data.get("part", ""),
            warn_percent=data["warn_percent"],
            note=data.get("note", ""),
        )
        return Response(self.out(LimitOut, limit))


@extend_schema_view(
    list=extend_schema(
        summary="List open upkeep alerts",
        description="Alerts not yet acknowledged whose part has not been changed since.",
        responses=AlertOut,
    ),
    acknowledge=extend_schema(
        summary="Acknowledge an alert",
        description="It leaves the open list and stays on record; acknowledging again changes "
        "nothing.",
        request=None,
        responses=AlertOut,
    ),
)
class AlertViewSet(StaffOnly):
    queryset = Alert.objects.none()
    filter_backends = [DjangoFilterBackend]
    filterset_class = AlertFilter
    ordering = ("-raised_at", "-id")
    instrument_path = "instrument_id"

    def get_queryset(self):
        if self.action == "list":
            return self.narrow(queries.open_alerts().select_related("acknowledged_by"))
        # Any alert may be acknowledged by id, also one already acknowledged or resolved.
        return self.narrow(Alert.objects.select_related("instrument", "pump", "acknowledged_by"))

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), AlertOut)

    @action(detail=True, methods=["post"])
    def acknowledge(self, request: Request, pk: str) -> Response:
        alert = services.acknowledge_alert(alert=self.get_object(), by=request.user)
        return Response(self.out(AlertOut, alert))
