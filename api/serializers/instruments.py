"""Instruments with their state now, and the busy times of their calendar."""

from __future__ import annotations

from drf_spectacular.utils import extend_schema_field
from rest_framework import serializers

from facility.instruments.models import EmitterType, InstrumentKind, VacuumMode
from facility.logbook.instrument_state import STATES, state_of


@extend_schema_field(
    {"type": "string", "pattern": "^([01][0-9]|2[0-3]):[0-5][0-9]$", "example": "08:00"}
)
class WallClockField(serializers.TimeField):
    """A time of day on the facility's clock (TIME_ZONE), "HH:MM".

    Not an OpenAPI `time`: that format (RFC 3339 full-time) needs a UTC offset, and opening hours
    follow the local clock through daylight-saving changes.
    """

    def __init__(self, **kwargs):
        super().__init__(format="%H:%M", **kwargs)


class InstrumentOut(serializers.Serializer):
    code = serializers.SlugField(read_only=True)
    name = serializers.CharField(read_only=True)
    kind = serializers.ChoiceField(choices=InstrumentKind.choices, read_only=True)
    emitter_type = serializers.ChoiceField(choices=EmitterType.choices, read_only=True)
    location = serializers.CharField(read_only=True)
    vacuum_modes = serializers.ListField(
        child=serializers.ChoiceField(choices=VacuumMode.choices), read_only=True
    )
    expected_resolution_nm = serializers.DictField(
        child=serializers.FloatField(),
        read_only=True,
        help_text="Expected resolution (nm) by accelerating voltage (kV).",
    )
    bookable_from = WallClockField(read_only=True, help_text="Start of normal hours, local.")
    bookable_until = WallClockField(read_only=True, help_text="End of normal hours, local.")
    bookable_weekdays = serializers.ListField(
        child=serializers.IntegerField(min_value=1, max_value=7),
        source="normal_weekdays",
        read_only=True,
        help_text="ISO weekdays of normal hours (1 = Monday).",
    )
    allows_out_of_hours = serializers.BooleanField(read_only=True)
    max_booking_minutes = serializers.IntegerField(read_only=True)
    cancellation_deadline_hours = serializers.IntegerField(read_only=True)
    is_active = serializers.BooleanField(read_only=True)
    state = serializers.SerializerMethodField(
        help_text="Now: free, booked (a booking covers now), in_session, or out_of_service."
    )

    @extend_schema_field(serializers.ChoiceField(choices=STATES))
    def get_state(self, instrument) -> str:
        return state_of(instrument)


class BusyQuery(serializers.Serializer):
    window_start = serializers.DateTimeField(help_text="Start of the window (ISO 8601).")
    window_end = serializers.DateTimeField(help_text="End of the window; at most 92 days later.")

    def validate(self, data: dict) -> dict:
        if data["window_end"] <= data["window_start"]:
            raise serializers.ValidationError({"window_end": ["Must be after window_start."]})
        if (data["window_end"] - data["window_start"]).days > 92:
            raise serializers.ValidationError({"window_end": ["At most 92 days after the start."]})
        return data


class BusySlotOut(serializers.Serializer):
    starts_at = serializers.DateTimeField(read_only=True)
    ends_at = serializers.DateTimeField(read_only=True)
    mine = serializers.SerializerMethodField(help_text="Whether the slot is your own booking.")

    def get_mine(self, booking) -> bool:
        return booking.user_id == self.context["request"].user.pk
