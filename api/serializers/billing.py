"""Billing: statements and their lines, drafting, finalising, adjustments, and usage reports.

Money is a decimal string everywhere ("1250.50", "-30.00"), in and out: a JSON number is refused
on input, since a float cannot hold every amount of cents exactly. Months are "YYYY-MM".
"""

from __future__ import annotations

import datetime as dt
import re
from decimal import Decimal
from typing import Any

from drf_spectacular.utils import extend_schema_field
from rest_framework import serializers

from facility.billing.models import ChargeKind, StatementState
from facility.errors import Invalid

# Years 1970–2999: wide enough for any facility's books, and the month after stays a date.
MONTH_PATTERN = r"^(19[7-9][0-9]|2[0-9]{3})-(0[1-9]|1[0-2])$"
MONEY_PATTERN = r"^-?[0-9]{1,10}(\.[0-9]{1,2})?$"


@extend_schema_field({"type": "string", "pattern": MONTH_PATTERN, "example": "2031-02"})
class MonthField(serializers.Field):
    """A calendar month as "YYYY-MM" (the facility's time zone decides its bounds)."""

    default_error_messages = {"invalid": "A month as YYYY-MM (1970–2999), e.g. 2031-02."}

    def to_internal_value(self, data: Any) -> dt.date:
        if not isinstance(data, str) or not re.match(MONTH_PATTERN, data):
            self.fail("invalid")
        year, month = data.split("-")
        return dt.date(int(year), int(month), 1)

    def to_representation(self, value: dt.date) -> str:
        return f"{value:%Y-%m}"


@extend_schema_field({"type": "string", "pattern": MONEY_PATTERN, "example": "-30.00"})
class MoneyField(serializers.Field):
    """An amount of money as a decimal string with at most two places; negative for a credit."""

    default_error_messages = {
        "invalid": "Give the amount as a decimal string with at most two places, e.g. '-30.00'."
    }

    def to_internal_value(self, data: Any) -> Decimal:
        # Strings only: a JSON number has already been through a binary float.
        if not isinstance(data, str) or not re.match(MONEY_PATTERN, data.strip()):
            self.fail("invalid")
        return Decimal(data.strip())

    def to_representation(self, value: Decimal) -> str:
        return str(value)


def parse_month(value: str, field: str = "month") -> dt.date:
    """A "YYYY-MM" from a path or a query parameter, or a 400 naming `field`."""
    try:
        return MonthField().to_internal_value(value)
    except serializers.ValidationError:
        raise Invalid(
            "A month as YYYY-MM (1970–2999), e.g. 2031-02.",
            fields={field: ["A month as YYYY-MM."]},
        ) from None


def money_out(**kwargs: Any) -> serializers.DecimalField:
    # DRF writes a DecimalField as a string (COERCE_DECIMAL_TO_STRING), never through a float.
    return serializers.DecimalField(max_digits=12, decimal_places=2, read_only=True, **kwargs)


class StatementOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    reference = serializers.CharField(read_only=True, help_text="e.g. S-000042; empty on a draft.")
    number = serializers.IntegerField(read_only=True, allow_null=True)
    account = serializers.CharField(source="account.code", read_only=True)
    account_name = serializers.CharField(source="account.name", read_only=True)
    group = serializers.IntegerField(source="account.group_id", read_only=True)
    group_name = serializers.CharField(source="account.group.name", read_only=True)
    month = MonthField(read_only=True)
    state = serializers.ChoiceField(choices=StatementState.choices, read_only=True)
    currency = serializers.CharField(read_only=True, help_text="ISO 4217; empty while no lines.")
    total = money_out()
    checksum = serializers.CharField(
        read_only=True, help_text="SHA-256 over the lines, set at finalisation."
    )
    problems = serializers.ListField(
        child=serializers.CharField(),
        read_only=True,
        help_text="Why the draft cannot be finalised yet.",
    )
    drafted_at = serializers.DateTimeField(read_only=True, allow_null=True)
    finalised_at = serializers.DateTimeField(read_only=True, allow_null=True)
    finalised_by = serializers.CharField(
        source="finalised_by.username", read_only=True, allow_null=True
    )


class LineOut(serializers.Serializer):
    id = serializers.IntegerField(read_only=True)
    statement = serializers.IntegerField(source="statement_id", read_only=True)
    position = serializers.IntegerField(read_only=True)
    kind = serializers.ChoiceField(choices=ChargeKind.choices, read_only=True)
    instrument = serializers.CharField(source="instrument.code", read_only=True, allow_null=True)
    user = serializers.CharField(source="user.username", read_only=True, allow_null=True)
    session = serializers.IntegerField(source="session_id", read_only=True, allow_null=True)
    booking = serializers.IntegerField(source="booking_id", read_only=True, allow_null=True)
    purpose = serializers.CharField(read_only=True, help_text="Empty on adjustments.")
    starts_at = serializers.DateTimeField(read_only=True, allow_null=True)
    ends_at = serializers.DateTimeField(read_only=True, allow_null=True)
    billed_minutes = serializers.IntegerField(read_only=True)
    out_of_hours_minutes = serializers.IntegerField(read_only=True)
    staff_minutes = serializers.IntegerField(read_only=True)
    hourly_rate = money_out(allow_null=True)
    staff_hourly_rate = money_out(allow_null=True)
    out_of_hours_factor = serializers.DecimalField(
        max_digits=5, decimal_places=3, read_only=True, allow_null=True
    )
    share = serializers.DecimalField(
        max_digits=4,
        decimal_places=3,
        read_only=True,
        allow_null=True,
        help_text="Share of the booked time charged (late cancellations, no-shows).",
    )
    currency = serializers.CharField(read_only=True)
    amount = money_out()
    description = serializers.CharField(read_only=True)
    reason = serializers.CharField(read_only=True, help_text="Why (adjustments).")
    created_by = serializers.CharField(
        source="created_by.username", read_only=True, allow_null=True
    )
    corrects = serializers.IntegerField(
        source="corrects_id",
        read_only=True,
        allow_null=True,
        help_text="The final statement an adjustment corrects.",
    )


class DraftMonthIn(serializers.Serializer):
    month = MonthField(help_text="The month to draft every account's statement for.")


class DraftRunOut(serializers.Serializer):
    """What a draft run did (facility/billing/services.DraftRun.as_dict())."""

    month = serializers.CharField(read_only=True)
    statements = serializers.IntegerField(read_only=True, help_text="Drafts made or rebuilt.")
    lines = serializers.IntegerField(read_only=True)
    totals = serializers.DictField(
        child=serializers.CharField(), read_only=True, help_text="Total by currency (strings)."
    )
    removed = serializers.IntegerField(read_only=True, help_text="Empty drafts removed.")
    skipped_final = serializers.ListField(
        child=serializers.CharField(), read_only=True, help_text="Accounts already final."
    )
    problems = serializers.DictField(
        child=serializers.ListField(child=serializers.CharField()), read_only=True
    )
    failed = serializers.DictField(child=serializers.CharField(), read_only=True)


class FinaliseIn(serializers.Serializer):
    expected_checksum = serializers.RegexField(
        r"^[0-9a-f]{64}$",
        required=False,
        help_text="The draft's checksum as you reviewed it: refuses (409) if the lines changed.",
    )


class AdjustmentIn(serializers.Serializer):
    account = serializers.CharField(max_length=40, help_text="Account code.")
    amount = MoneyField(help_text="Negative for a credit, positive for a debit.")
    reason = serializers.CharField(max_length=250)
    month = MonthField(
        required=False,
        help_text="The statement's month; for a correction, defaults to the month after.",
    )
    corrects = serializers.IntegerField(
        required=False, min_value=1, help_text="Id of the final statement this corrects."
    )
    currency = serializers.RegexField(
        r"^[A-Z]{3}$", required=False, help_text="ISO 4217; defaults to the statement's."
    )


class UsageRowOut(serializers.Serializer):
    """One instrument's month (facility/billing/usage.InstrumentUsage); hours as strings."""

    instrument = serializers.CharField(read_only=True)
    name = serializers.CharField(read_only=True)
    booked_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    used_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    no_show_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    late_cancelled_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    downtime_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    bookable_hours = serializers.DecimalField(max_digits=10, decimal_places=2, read_only=True)
    utilisation = serializers.DecimalField(
        max_digits=8,
        decimal_places=3,
        read_only=True,
        allow_null=True,
        help_text="Used over bookable hours; null without bookable hours.",
    )
    sessions = serializers.IntegerField(read_only=True)
    bookings = serializers.IntegerField(read_only=True)


class UsageOut(serializers.Serializer):
    month = MonthField(read_only=True)
    instruments = UsageRowOut(many=True, read_only=True)
