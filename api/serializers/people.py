"""Accounts a person may book on, and who the caller is."""

from __future__ import annotations

from rest_framework import serializers

from api.models import Scope, TokenKind
from facility.people.models import AccountKind


class AccountOut(serializers.Serializer):
    code = serializers.CharField(read_only=True)
    name = serializers.CharField(read_only=True)
    kind = serializers.ChoiceField(choices=AccountKind.choices, read_only=True)
    group = serializers.IntegerField(source="group_id", read_only=True)
    group_name = serializers.CharField(source="group.name", read_only=True)
    valid_from = serializers.DateField(read_only=True)
    valid_to = serializers.DateField(read_only=True, allow_null=True)
    is_active = serializers.BooleanField(read_only=True)


class GroupOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    name = serializers.CharField(read_only=True)


class CallerTokenOut(serializers.Serializer):
    kind = serializers.ChoiceField(choices=TokenKind.choices, read_only=True)
    scopes = serializers.ListField(child=serializers.ChoiceField(choices=Scope.choices))
    instrument = serializers.CharField(source="instrument.code", read_only=True, allow_null=True)
    expires_at = serializers.DateTimeField(read_only=True)


class MeOut(serializers.Serializer):
    username = serializers.CharField(read_only=True)
    first_name = serializers.CharField(read_only=True)
    last_name = serializers.CharField(read_only=True)
    is_staff = serializers.BooleanField(read_only=True)
    groups = GroupOut(many=True, read_only=True)
    token = CallerTokenOut(read_only=True, allow_null=True, help_text="Null when signed in.")
