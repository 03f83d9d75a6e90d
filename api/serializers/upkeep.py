"""Upkeep (staff only): counters against their limits, service events, meter readings, limits and
alerts. Money (a service's cost) and stored decimals (meter hours, ratings) are strings, so a
script never meets a float rounding of what staff typed."""

from __future__ import annotations

from rest_framework import serializers

from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS
from facility.upkeep.models import AlertLevel, Counter, ServiceKind
from facility.upkeep.status import State

COUNTER_STATES = (State.OK, State.WARN, State.OVER, State.UNRATED)
# What a counter counts: beam-on hours, chamber hours, calendar hours, or vent cycles.
COUNTER_BASES = (BEAM_ON, CHAMBER, CALENDAR, VENTS)


class WindowQuery(serializers.Serializer):
    start = serializers.DateTimeField(required=False, help_text="From this moment (included).")
    end = serializers.DateTimeField(required=False, help_text="Before this moment.")

    def validate(self, data: dict) -> dict:
        if data.get("start") and data.get("end") and data["end"] <= data["start"]:
            raise serializers.ValidationError({"end": ["Must be after start."]})
        return data


class _PumpAndPart(serializers.Serializer):
    pump = serializers.IntegerField(
        required=False,
        allow_null=True,
        min_value=1,
        help_text="Id of one of the instrument's pumps (pump events and pump hours only).",
    )
    part = serializers.CharField(
        max_length=60,
        required=False,
        allow_blank=True,
        help_text="Wear part counted in vent cycles, e.g. chamber-door-seal.",
    )


class ServiceEventIn(_PumpAndPart):
    kind = serializers.ChoiceField(choices=ServiceKind.choices)
    performed_at = serializers.DateTimeField(
        help_text="When the work was done (not in the future)."
    )
    performed_by = serializers.CharField(
        max_length=120, required=False, allow_blank=True, help_text="Staff member or engineer."
    )
    notes = serializers.CharField(max_length=4000, required=False, allow_blank=True)
    cost = serializers.DecimalField(
        max_digits=10,
        decimal_places=2,
        min_value=0,
        required=False,
        allow_null=True,
        help_text="What the work cost, in the facility's currency.",
    )


class MeterReadingIn(serializers.Serializer):
    counter = serializers.ChoiceField(
        choices=Counter.choices,
        help_text="emitter_hours or pump_hours: vent cycles have no meter on the instrument.",
    )
    pump = serializers.IntegerField(
        required=False, allow_null=True, min_value=1, help_text="Id of the pump, for pump hours."
    )
    value = serializers.DecimalField(
        max_digits=10, decimal_places=2, min_value=0, help_text="Hours the meter shows."
    )
    read_at = serializers.DateTimeField()
    note = serializers.CharField(max_length=300, required=False, allow_blank=True)


class LimitIn(_PumpAndPart):
    counter = serializers.ChoiceField(choices=Counter.choices)
    rated = serializers.DecimalField(
        max_digits=10,
        decimal_places=1,
        min_value=0,
        help_text="Rated life: hours, or vent cycles; more than 0.",
    )
    warn_percent = serializers.IntegerField(
        min_value=1, max_value=100, required=False, default=80, help_text="Warn at this share."
    )
    note = serializers.CharField(
        max_length=300, required=False, allow_blank=True, help_text="Where the rating comes from."
    )


class _Pumped(serializers.Serializer):
    instrument = serializers.CharField(source="instrument.code", read_only=True)
    pump = serializers.IntegerField(source="pump_id", read_only=True, allow_null=True)
    pump_name = serializers.CharField(source="pump.name", read_only=True, allow_null=True)


class ServiceEventOut(_Pumped):
    id = serializers.IntegerField(read_only=True)
    # A plain string here: `kind` already names several choice sets (accounts, tokens,
    # instruments), and drf-spectacular can name this one only while it sits in one component.
    kind = serializers.CharField(read_only=True, help_text="One of ServiceEventIn's kinds.")
    part = serializers.CharField(read_only=True)
    performed_at = serializers.DateTimeField(read_only=True)
    performed_by = serializers.CharField(read_only=True)
    notes = serializers.CharField(read_only=True)
    cost = serializers.DecimalField(
        max_digits=10, decimal_places=2, read_only=True, allow_null=True
    )
    recorded_by = serializers.CharField(
        source="recorded_by.username", read_only=True, allow_null=True
    )
    created_at = serializers.DateTimeField(read_only=True)


class MeterReadingOut(_Pumped):
    id = serializers.IntegerField(read_only=True)
    counter = serializers.ChoiceField(choices=Counter.choices, read_only=True)
    value = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    read_at = serializers.DateTimeField(read_only=True)
    note = serializers.CharField(read_only=True)
    recorded_by = serializers.CharField(
        source="recorded_by.username", read_only=True, allow_null=True
    )
    created_at = serializers.DateTimeField(read_only=True)


class LimitOut(_Pumped):
    id = serializers.IntegerField(read_only=True)
    counter = serializers.ChoiceField(choices=Counter.choices, read_only=True)
    part = serializers.CharField(read_only=True)
    rated = serializers.DecimalField(max_digits=10, decimal_places=1, read_only=True)
    warn_percent = serializers.IntegerField(read_only=True)
    note = serializers.CharField(read_only=True)
    set_by = serializers.CharField(source="set_by.username", read_only=True, allow_null=True)
    updated_at = serializers.DateTimeField(read_only=True)


class AlertOut(_Pumped):
    id = serializers.IntegerField(read_only=True)
    counter = serializers.ChoiceField(choices=Counter.choices, read_only=True)
    part = serializers.CharField(read_only=True)
    level = serializers.ChoiceField(choices=AlertLevel.choices, read_only=True)
    value = serializers.FloatField(read_only=True, help_text="The counter when it was raised.")
    rated = serializers.FloatField(read_only=True)
    forecast_on = serializers.DateField(read_only=True, allow_null=True)
    message = serializers.CharField(read_only=True)
    raised_at = serializers.DateTimeField(read_only=True)
    resolved_at = serializers.DateTimeField(
        read_only=True, allow_null=True, help_text="Set when the part was changed or serviced."
    )
    acknowledged_at = serializers.DateTimeField(read_only=True, allow_null=True)
    acknowledged_by = serializers.CharField(
        source="acknowledged_by.username", read_only=True, allow_null=True
    )


class ForecastOut(serializers.Serializer):
    reached = serializers.BooleanField(read_only=True)
    at_rate = serializers.DictField(
        child=serializers.DateTimeField(allow_null=True),
        read_only=True,
        help_text="When the rating is reached at the rate of each trailing window (weeks).",
    )
    earliest = serializers.DateTimeField(read_only=True, allow_null=True)
    latest = serializers.DateTimeField(read_only=True, allow_null=True)
    central = serializers.DateTimeField(read_only=True, allow_null=True)
    plus_minus_days = serializers.FloatField(read_only=True, allow_null=True)
    text = serializers.CharField(read_only=True)


class LatestReadingOut(serializers.Serializer):
    read_at = serializers.DateTimeField(read_only=True)
    value = serializers.FloatField(read_only=True, help_text="What the meter showed, hours.")
    logbook = serializers.FloatField(read_only=True, help_text="What the logbook predicted.")
    drift = serializers.FloatField(read_only=True, help_text="Meter minus logbook, hours.")


class CounterOut(serializers.Serializer):
    """One counter (facility/upkeep/status.CounterStatus.as_dict), derived from the logbook."""

    key = serializers.CharField(read_only=True, help_text="Stable name of the counter.")
    instrument = serializers.CharField(read_only=True)
    counter = serializers.ChoiceField(choices=Counter.choices, read_only=True)
    pump = serializers.IntegerField(read_only=True, allow_null=True)
    part = serializers.CharField(read_only=True)
    label = serializers.CharField(read_only=True)
    basis = serializers.ChoiceField(choices=COUNTER_BASES, read_only=True)
    unit = serializers.ChoiceField(choices=("h", "cycles"), read_only=True)
    value = serializers.FloatField(read_only=True, help_text="Now, meter readings applied.")
    derived_value = serializers.FloatField(read_only=True, help_text="From the logbook alone.")
    drift = serializers.FloatField(read_only=True)
    since = serializers.DateTimeField(read_only=True, allow_null=True)
    since_known = serializers.BooleanField(read_only=True)
    rated = serializers.FloatField(read_only=True, allow_null=True)
    rated_is_default = serializers.BooleanField(read_only=True)
    rating_source = serializers.CharField(read_only=True)
    warn_percent = serializers.IntegerField(read_only=True)
    share = serializers.FloatField(read_only=True, allow_null=True, help_text="value / rated.")
    state = serializers.ChoiceField(choices=COUNTER_STATES, read_only=True)
    rate_per_week = serializers.DictField(
        child=serializers.FloatField(allow_null=True),
        read_only=True,
        help_text="Use per week over each trailing window (weeks).",
    )
    forecast = ForecastOut(read_only=True, allow_null=True)
    latest_reading = LatestReadingOut(read_only=True, allow_null=True)


class InstrumentCountersOut(serializers.Serializer):
    instrument = serializers.CharField(read_only=True)
    name = serializers.CharField(read_only=True)
    counters = CounterOut(many=True, read_only=True)
