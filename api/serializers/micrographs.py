"""Micrographs, their upload, and their assessment."""

from __future__ import annotations

from django.urls import reverse
from rest_framework import serializers

from api.serializers.sessions import ConditionsFields
from facility.logbook.models import AnalysisState


class MicrographOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    session = serializers.IntegerField(source="session_id", read_only=True)
    instrument = serializers.CharField(source="session.instrument.code", read_only=True)
    conditions = serializers.IntegerField(source="conditions_id", read_only=True, allow_null=True)
    original_name = serializers.CharField(read_only=True)
    sha256 = serializers.CharField(read_only=True)
    content_type = serializers.CharField(read_only=True)
    size_bytes = serializers.IntegerField(read_only=True)
    width = serializers.IntegerField(read_only=True, allow_null=True)
    height = serializers.IntegerField(read_only=True, allow_null=True)
    pages = serializers.IntegerField(read_only=True)
    bit_depth = serializers.IntegerField(read_only=True, allow_null=True)
    pixel_size_nm = serializers.FloatField(read_only=True, allow_null=True)
    pixel_size_source = serializers.CharField(read_only=True)
    state = serializers.ChoiceField(choices=AnalysisState.choices, read_only=True)
    failure_reason = serializers.CharField(read_only=True)
    uploaded_by = serializers.CharField(
        source="uploaded_by.username", read_only=True, allow_null=True
    )
    uploaded_at = serializers.DateTimeField(read_only=True)
    analysed_at = serializers.DateTimeField(read_only=True, allow_null=True)
    original_url = serializers.SerializerMethodField()
    thumbnail_url = serializers.SerializerMethodField(help_text="Empty until analysed.")

    def get_original_url(self, micrograph) -> str:
        return reverse("api:micrograph-original", args=[micrograph.pk])

    def get_thumbnail_url(self, micrograph) -> str:
        if not micrograph.thumbnail:
            return ""
        return reverse("api:micrograph-thumbnail", args=[micrograph.pk])


class MicrographDetailOut(MicrographOut):
    metadata = serializers.JSONField(read_only=True, help_text="What the file itself says.")


class MicrographUploadIn(ConditionsFields):
    """The image file, and optionally the conditions the operator logged for it."""

    file = serializers.FileField(
        allow_empty_file=True,  # the logbook refuses an empty file with its own message
        max_length=255,
        help_text="TIFF, PNG or JPEG; judged by content, not by name.",
    )


class AssessmentOut(serializers.Serializer):
    micrograph = serializers.IntegerField(source="micrograph_id", read_only=True)
    analysis_version = serializers.CharField(read_only=True)
    sigma_px = serializers.FloatField(read_only=True, allow_null=True)
    resolution_px = serializers.FloatField(read_only=True, allow_null=True)
    resolution_nm = serializers.FloatField(read_only=True, allow_null=True)
    astigmatism_ratio = serializers.FloatField(read_only=True, allow_null=True)
    astigmatism_angle_deg = serializers.FloatField(read_only=True, allow_null=True)
    charging_score = serializers.FloatField(read_only=True, allow_null=True)
    saturated_fraction = serializers.FloatField(read_only=True, allow_null=True)
    pixel_limited = serializers.BooleanField(read_only=True)
    flags = serializers.ListField(child=serializers.CharField(), read_only=True)
    evidence = serializers.JSONField(read_only=True)
    created_at = serializers.DateTimeField(read_only=True)
