"""Shapes shared by every resource: the error body, and choice fields stated in place."""

from __future__ import annotations

import functools
from typing import Any

from django.db import models
from drf_spectacular.utils import extend_schema_field
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


@functools.cache
def _inline_choice_class(choices: type[models.Choices], blank: bool) -> type:
    values = [*choices.values, ""] if blank else list(choices.values)
    labels = "\n".join(f"* `{c.value}` - {c.label}" for c in choices)
    schema = {"type": "string", "enum": values, "description": labels}
    return extend_schema_field(schema)(
        type(f"Inline{choices.__name__}Field", (serializers.ChoiceField,), {})
    )


def inline_choices(choices: type[models.Choices], **kwargs: Any) -> serializers.ChoiceField:
    """A choice field whose enum the schema states in place rather than as a named component.

    For a choice set that already has a component under another field's name (the logbook's
    coating materials are `material`; the finder asks for a `coating`): drf-spectacular warns of
    a set with two names, and warnings fail CI. (An ENUM_NAME_OVERRIDES entry in the settings
    would give the set one name instead.)
    """
    cls = _inline_choice_class(choices, bool(kwargs.get("allow_blank")))
    return cls(choices=choices.choices, **kwargs)
