"""Instrument sessions (logbook entries), with their specimen, coating and conditions."""

from __future__ import annotations

from rest_framework import serializers

from facility.bookings.models import Purpose
from facility.instruments.models import VacuumMode
from facility.logbook.models import (
    CoatingMaterial,
    CoatingMethod,
    ConditionsSource,
    Conductivity,
    MaterialClass,
    SpecimenForm,
)


class SpecimenOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    name = serializers.CharField(read_only=True)
    material = serializers.CharField(read_only=True)
    material_class = serializers.ChoiceField(choices=MaterialClass.choices, read_only=True)
    conductivity = serializers.ChoiceField(choices=Conductivity.choices, read_only=True)
    form = serializers.ChoiceField(choices=SpecimenForm.choices, read_only=True)
    feature_size_nm = serializers.FloatField(read_only=True, allow_null=True)
    beam_sensitive = serializers.BooleanField(read_only=True)
    e2_kev = serializers.FloatField(read_only=True, allow_null=True)
    preparation = serializers.CharField(read_only=True)
    tags = serializers.ListField(child=serializers.CharField(), read_only=True)
    notes = serializers.CharField(read_only=True)
    owner = serializers.CharField(source="owner.username", read_only=True)
    group = serializers.IntegerField(source="group_id", read_only=True)
    created_at = serializers.DateTimeField(read_only=True)


class CoatingOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    material = serializers.ChoiceField(choices=CoatingMaterial.choices, read_only=True)
    thickness_nm = serializers.FloatField(read_only=True)
    method = serializers.ChoiceField(choices=CoatingMethod.choices, read_only=True)
    applied_at = serializers.DateTimeField(read_only=True, allow_null=True)


class ConditionsFields(serializers.Serializer):
    """The settings of one set of conditions; all optional, ranges are checked by the logbook."""

    label = serializers.CharField(max_length=80, required=False, allow_blank=True)
    accelerating_voltage_kv = serializers.FloatField(required=False, allow_null=True)
    working_distance_mm = serializers.FloatField(required=False, allow_null=True)
    probe_current_na = serializers.FloatField(required=False, allow_null=True)
    spot_size = serializers.FloatField(required=False, allow_null=True)
    aperture_um = serializers.FloatField(required=False, allow_null=True)
    detector = serializers.CharField(max_length=60, required=False, allow_blank=True)
    dwell_time_us = serializers.FloatField(required=False, allow_null=True)
    magnification = serializers.FloatField(required=False, allow_null=True)
    vacuum_mode = serializers.ChoiceField(
        choices=VacuumMode.choices, required=False, allow_blank=True
    )
    chamber_pressure_pa = serializers.FloatField(required=False, allow_null=True)
    tilt_deg = serializers.FloatField(required=False, allow_null=True)


class ConditionsIn(ConditionsFields):
    pass


class ConditionsOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    label = serializers.CharField(read_only=True)
    accelerating_voltage_kv = serializers.FloatField(read_only=True, allow_null=True)
    working_distance_mm = serializers.FloatField(read_only=True, allow_null=True)
    probe_current_na = serializers.FloatField(read_only=True, allow_null=True)
    spot_size = serializers.FloatField(read_only=True, allow_null=True)
    aperture_um = serializers.FloatField(read_only=True, allow_null=True)
    detector = serializers.CharField(read_only=True)
    dwell_time_us = serializers.FloatField(read_only=True, allow_null=True)
    magnification = serializers.FloatField(read_only=True, allow_null=True)
    vacuum_mode = serializers.CharField(read_only=True, help_text="Empty when not logged.")
    chamber_pressure_pa = serializers.FloatField(read_only=True, allow_null=True)
    tilt_deg = serializers.FloatField(read_only=True, allow_null=True)
    source = serializers.ChoiceField(choices=ConditionsSource.choices, read_only=True)
    created_at = serializers.DateTimeField(read_only=True)


class SessionOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    instrument = serializers.CharField(source="instrument.code", read_only=True)
    operator = serializers.CharField(source="operator.username", read_only=True)
    account = serializers.CharField(source="account.code", read_only=True)
    group = serializers.IntegerField(source="account.group_id", read_only=True)
    booking = serializers.IntegerField(source="booking_id", read_only=True, allow_null=True)
    purpose = serializers.ChoiceField(choices=Purpose.choices, read_only=True)
    started_at = serializers.DateTimeField(read_only=True)
    ended_at = serializers.DateTimeField(read_only=True, allow_null=True)
    is_open = serializers.BooleanField(read_only=True)
    beam_on_hours = serializers.DecimalField(
        max_digits=7, decimal_places=2, read_only=True, allow_null=True
    )
    vent_cycles = serializers.IntegerField(read_only=True)
    staff_minutes = serializers.IntegerField(read_only=True)
    vacuum_mode = serializers.ChoiceField(choices=VacuumMode.choices, read_only=True)
    specimen = SpecimenOut(read_only=True, allow_null=True)
    coating = CoatingOut(read_only=True, allow_null=True)
    notes = serializers.CharField(read_only=True)
    fault_report = serializers.CharField(read_only=True)


class SessionDetailOut(SessionOut):
    conditions = ConditionsOut(many=True, read_only=True)


class CheckInIn(serializers.Serializer):
    instrument = serializers.SlugField(max_length=40, help_text="Instrument code.")
    booking = serializers.IntegerField(
        required=False,
        min_value=1,
        help_text="Your booking to start; default: your booking that covers now, if any.",
    )
    account = serializers.CharField(
        max_length=40, required=False, help_text="Account code; required for a walk-up."
    )
    purpose = serializers.ChoiceField(choices=Purpose.choices, required=False)
    operator = serializers.CharField(
        max_length=150, required=False, help_text="Staff only: check this person in (username)."
    )


class CheckOutIn(serializers.Serializer):
    beam_on_hours = serializers.DecimalField(
        max_digits=7,
        decimal_places=2,
        min_value=0,
        required=False,
        help_text="Default: the whole session.",
    )
    vent_cycles = serializers.IntegerField(min_value=0, max_value=1000, default=0)
    staff_minutes = serializers.IntegerField(min_value=0, max_value=100_000, required=False)


class SessionUpdateIn(serializers.Serializer):
    vacuum_mode = serializers.ChoiceField(choices=VacuumMode.choices, required=False)
    notes = serializers.CharField(required=False, allow_blank=True, max_length=20_000)
    fault_report = serializers.CharField(required=False, allow_blank=True, max_length=20_000)


class SpecimenIn(serializers.Serializer):
    """Either `specimen` (an existing one of your group) or a description of a new one."""

    specimen = serializers.IntegerField(required=False, min_value=1)
    name = serializers.CharField(max_length=160, required=False)
    material = serializers.CharField(max_length=160, required=False)
    material_class = serializers.ChoiceField(choices=MaterialClass.choices, required=False)
    conductivity = serializers.ChoiceField(choices=Conductivity.choices, required=False)
    form = serializers.ChoiceField(choices=SpecimenForm.choices, required=False)
    feature_size_nm = serializers.FloatField(required=False, allow_null=True, min_value=0)
    beam_sensitive = serializers.BooleanField(required=False)
    e2_kev = serializers.FloatField(required=False, allow_null=True, min_value=0)
    preparation = serializers.CharField(required=False, allow_blank=True, max_length=20_000)
    tags = serializers.ListField(
        child=serializers.CharField(max_length=60), required=False, max_length=50
    )
    notes = serializers.CharField(required=False, allow_blank=True, max_length=20_000)

    def validate(self, data: dict) -> dict:
        if "specimen" in data and len(data) > 1:
            raise serializers.ValidationError(
                "Give either an existing specimen's id or a description, not both."
            )
        return data


class CoatingIn(serializers.Serializer):
    material = serializers.ChoiceField(choices=CoatingMaterial.choices)
    thickness_nm = serializers.FloatField(default=0.0, min_value=0, max_value=1000)
    method = serializers.ChoiceField(choices=CoatingMethod.choices, required=False)
    applied_at = serializers.DateTimeField(required=False, allow_null=True)
