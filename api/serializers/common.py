"""Shapes shared by every resource: the error body."""

from __future__ import annotations

from rest_framework import serializers


class ErrorDetail(serializers.Serializer):
    code = serializers.CharField(help_text="Stable name of the error, for scripts.")
    message = serializers.CharField(help_text="What went wrong and what to do, for people.")
    fields = serializers.DictField(
        child=serializers.ListField(child=serializers.CharField()),
        help_text="Messages by input field; empty when the error is not about one field.",
    )


class Error(serializers.Serializer):
    error = ErrorDetail()
