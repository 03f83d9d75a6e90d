"""Flags on sessions and micrographs, and their dismissal."""

from __future__ import annotations

from rest_framework import serializers

from facility.logbook.models import FlagCode, Severity


class FlagOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    session = serializers.IntegerField(source="session_id", read_only=True)
    micrograph = serializers.IntegerField(source="micrograph_id", read_only=True, allow_null=True)
    code = serializers.ChoiceField(choices=FlagCode.choices, read_only=True)
    severity = serializers.ChoiceField(choices=Severity.choices, read_only=True)
    message = serializers.CharField(read_only=True)
    evidence = serializers.JSONField(read_only=True)
    remedies = serializers.ListField(child=serializers.CharField(), read_only=True)
    computed_at = serializers.DateTimeField(read_only=True)
    dismissed_at = serializers.DateTimeField(read_only=True, allow_null=True)
    dismissed_by = serializers.CharField(
        source="dismissed_by.username", read_only=True, allow_null=True
    )
    dismiss_reason = serializers.CharField(read_only=True)


class DismissIn(serializers.Serializer):
    reason = serializers.CharField(max_length=300, help_text="Why the flag does not apply here.")
