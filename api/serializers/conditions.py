"""The conditions finder: what a researcher describes, and what worked on similar specimens.

Input fields are the finder's criteria (facility/finder/criteria.py), which make_criteria checks
again; output mirrors facility/finder/queries.Result. A hit's details (date, instrument, specimen,
operator, group, images) are present only when the hit is `visible` to the caller.
"""

from __future__ import annotations

from typing import Any

from django.urls import reverse
from rest_framework import serializers

from api.serializers.common import inline_choices
from facility.instruments.models import InstrumentKind, VacuumMode
from facility.logbook.models import CoatingMaterial, Conductivity, MaterialClass, SpecimenForm

# The most hits one answer holds; the summary is drawn from the finder's own pool regardless.
MAX_HITS = 50


class ConditionsSearchIn(serializers.Serializer):
    """At least one attribute or some text. Sent as query parameters (GET) or a JSON body (POST)."""

    text = serializers.CharField(
        max_length=300,
        required=False,
        allow_blank=True,
        help_text="Free text: material, preparation, notes (e.g. 'PCL membrane').",
    )
    material_class = serializers.ChoiceField(
        choices=MaterialClass.choices, required=False, allow_blank=True
    )
    conductivity = serializers.ChoiceField(
        choices=Conductivity.choices, required=False, allow_blank=True
    )
    form = serializers.ChoiceField(choices=SpecimenForm.choices, required=False, allow_blank=True)
    feature_size_nm = serializers.FloatField(
        required=False,
        allow_null=True,
        min_value=0,
        max_value=1e7,
        help_text="Size of the features of interest, nm (more than 0).",
    )
    beam_sensitive = serializers.BooleanField(required=False, allow_null=True)
    coating = inline_choices(
        CoatingMaterial,
        required=False,
        allow_blank=True,
        help_text="The coating you plan; 'none' for uncoated.",
    )
    vacuum_mode = serializers.ChoiceField(
        choices=VacuumMode.choices, required=False, allow_blank=True
    )
    instrument_kind = serializers.ChoiceField(
        choices=InstrumentKind.choices, required=False, allow_blank=True
    )
    limit = serializers.IntegerField(
        required=False,
        default=20,
        min_value=1,
        max_value=MAX_HITS,
        help_text="How many hits to list (the summary counts all similar sessions).",
    )


class CriteriaOut(serializers.Serializer):
    """The criteria as the finder understood them."""

    text = serializers.CharField(read_only=True)
    material_class = serializers.CharField(read_only=True, allow_null=True)
    conductivity = serializers.CharField(read_only=True, allow_null=True)
    form = serializers.CharField(read_only=True, allow_null=True)
    feature_size_nm = serializers.FloatField(read_only=True, allow_null=True)
    beam_sensitive = serializers.BooleanField(read_only=True, allow_null=True)
    coating = serializers.CharField(read_only=True, allow_null=True)
    vacuum_mode = serializers.CharField(read_only=True, allow_null=True)
    instrument_kind = serializers.CharField(read_only=True, allow_null=True)


class MedianRangeOut(serializers.Serializer):
    median = serializers.FloatField(read_only=True)
    min = serializers.FloatField(read_only=True)
    max = serializers.FloatField(read_only=True)
    count = serializers.IntegerField(read_only=True, help_text="Values the figures come from.")


class CountedOut(serializers.Serializer):
    """One choice and how many similar sessions (or logged conditions) made it."""

    value = serializers.CharField(read_only=True)
    count = serializers.IntegerField(read_only=True)

    def to_representation(self, instance: Any) -> dict[str, Any]:
        # The finder counts with Counter.most_common(): (value, count) pairs.
        value, count = instance
        return {"value": str(value), "count": int(count)}


class SettingsOut(serializers.Serializer):
    """What worked: settings of the similar sessions whose images were not flagged."""

    accelerating_voltage_kv = MedianRangeOut(read_only=True, allow_null=True)
    working_distance_mm = MedianRangeOut(read_only=True, allow_null=True)
    probe_current_na = MedianRangeOut(read_only=True, allow_null=True)
    coating_thickness_nm = MedianRangeOut(read_only=True, allow_null=True)
    detector = CountedOut(many=True, read_only=True)
    vacuum_mode = CountedOut(many=True, read_only=True)
    coating = CountedOut(many=True, read_only=True, help_text="Coating material or 'uncoated'.")


class SummaryOut(serializers.Serializer):
    similar = serializers.IntegerField(read_only=True, help_text="Similar sessions considered.")
    worked = serializers.IntegerField(read_only=True, help_text="Analysed, no failure flag.")
    failed = serializers.IntegerField(read_only=True, help_text="Charging, blur or astigmatism.")
    settings = SettingsOut(read_only=True)
    failures = serializers.ListField(
        child=serializers.CharField(),
        read_only=True,
        help_text="What the failed sessions had in common, in sentences.",
    )


class SuggestionOut(serializers.Serializer):
    """Conditions to start from (medians and most common choices); null where nothing worked."""

    accelerating_voltage_kv = serializers.FloatField(read_only=True, allow_null=True)
    working_distance_mm = serializers.FloatField(read_only=True, allow_null=True)
    probe_current_na = serializers.FloatField(read_only=True, allow_null=True)
    detector = serializers.CharField(read_only=True, allow_null=True)
    vacuum_mode = serializers.CharField(read_only=True, allow_null=True)


class HitConditionsOut(serializers.Serializer):
    """One logged set of conditions of a hit; a setting not logged is null."""

    accelerating_voltage_kv = serializers.FloatField(read_only=True, allow_null=True)
    working_distance_mm = serializers.FloatField(read_only=True, allow_null=True)
    probe_current_na = serializers.FloatField(read_only=True, allow_null=True)
    detector = serializers.CharField(read_only=True, allow_null=True)
    dwell_time_us = serializers.FloatField(read_only=True, allow_null=True)
    vacuum_mode = serializers.CharField(read_only=True, allow_null=True)


class HitMicrographOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    thumbnail_url = serializers.SerializerMethodField()

    def to_representation(self, instance: Any) -> dict[str, Any]:
        # The finder hands over micrograph ids only.
        return super().to_representation({"id": instance})

    def get_thumbnail_url(self, row: dict[str, Any]) -> str:
        return reverse("api:conditions-thumbnail", kwargs={"micrograph_id": row["id"]})


class HitOut(serializers.Serializer):
    """One similar past session: always its conditions and outcome; details only if `visible`."""

    score = serializers.FloatField(read_only=True)
    reasons = serializers.ListField(
        child=serializers.CharField(), read_only=True, help_text="Why it matched."
    )
    outcome = serializers.CharField(
        read_only=True,
        help_text="'worked', 'not analysed', or the failure flag's code (e.g. 'charging').",
    )
    conditions = HitConditionsOut(many=True, read_only=True)
    coating = serializers.CharField(read_only=True, help_text="e.g. 'Au 8 nm' or 'uncoated'.")
    vacuum_mode = serializers.CharField(read_only=True)
    material_class = serializers.CharField(read_only=True)
    conductivity = serializers.CharField(read_only=True)
    form = serializers.CharField(read_only=True)
    feature_size_nm = serializers.FloatField(read_only=True, allow_null=True)
    instrument_kind = serializers.CharField(read_only=True)
    visible = serializers.BooleanField(
        read_only=True,
        help_text="Whether you may see this session's details: yours, your groups', or a group "
        "that shares them. Otherwise the fields below are null and no images are listed.",
    )
    session = serializers.IntegerField(read_only=True, allow_null=True, source="session_id")
    session_url = serializers.CharField(
        read_only=True,
        allow_null=True,
        help_text="The session in this API, when it is one of your groups' sessions.",
    )
    date = serializers.DateField(read_only=True, allow_null=True)
    instrument = serializers.CharField(read_only=True, allow_null=True)
    specimen = serializers.CharField(read_only=True, allow_null=True)
    material = serializers.CharField(read_only=True, allow_null=True)
    operator = serializers.CharField(read_only=True, allow_null=True)
    group = serializers.CharField(read_only=True, allow_null=True)
    micrographs = HitMicrographOut(many=True, read_only=True, source="micrograph_ids")


class ConditionsSearchOut(serializers.Serializer):
    criteria = CriteriaOut(read_only=True)
    summary = SummaryOut(read_only=True)
    suggestion = SuggestionOut(read_only=True)
    hits = HitOut(many=True, read_only=True)
