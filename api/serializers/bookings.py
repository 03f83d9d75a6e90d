"""Bookings: what a client may ask for, and what it is shown."""

from __future__ import annotations

from rest_framework import serializers

from facility.bookings.models import BookingState, Purpose


class BookingOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    instrument = serializers.CharField(source="instrument.code", read_only=True)
    user = serializers.CharField(source="user.username", read_only=True)
    account = serializers.CharField(source="account.code", read_only=True)
    group = serializers.IntegerField(source="account.group_id", read_only=True)
    starts_at = serializers.DateTimeField(read_only=True)
    ends_at = serializers.DateTimeField(read_only=True)
    purpose = serializers.ChoiceField(choices=Purpose.choices, read_only=True)
    state = serializers.ChoiceField(choices=BookingState.choices, read_only=True)
    note = serializers.CharField(read_only=True)
    created_at = serializers.DateTimeField(read_only=True)
    cancelled_at = serializers.DateTimeField(read_only=True, allow_null=True)


class BookingCreateIn(serializers.Serializer):
    instrument = serializers.SlugField(max_length=40, help_text="Instrument code.")
    account = serializers.CharField(
        max_length=40, help_text="Code of one of your group's accounts."
    )
    starts_at = serializers.DateTimeField()
    ends_at = serializers.DateTimeField(help_text="End, exclusive: [starts_at, ends_at).")
    purpose = serializers.ChoiceField(choices=Purpose.choices, default=Purpose.OWN_USE)
    note = serializers.CharField(max_length=300, required=False, allow_blank=True, default="")
    user = serializers.CharField(
        max_length=150,
        required=False,
        help_text="Staff only: book for this person (username). Default: yourself.",
    )
    override_hours = serializers.BooleanField(
        default=False, help_text="Staff only: book outside the bookable hours."
    )


class BookingMoveIn(serializers.Serializer):
    starts_at = serializers.DateTimeField()
    ends_at = serializers.DateTimeField()
    override_hours = serializers.BooleanField(default=False)
