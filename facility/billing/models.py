"""Billing: tariffs, public holidays, monthly statements per account and their lines (charges).

Money is `Decimal` with two places everywhere. A statement is a draft until a manager finalises it;
from then on it and its lines are immutable (the service refuses, the admin is read-only, and on
PostgreSQL a trigger from migration 0002 refuses UPDATE and DELETE).
"""

from __future__ import annotations

from decimal import Decimal

from django.conf import settings
from django.db import models
from django.db.models import F, Q
from simple_history.models import HistoricalRecords

from facility.bookings.models import Booking, Purpose
from facility.instruments.models import Instrument
from facility.logbook.models import InstrumentSession
from facility.people.models import Account, RateCategory

MONEY = {"max_digits": 12, "decimal_places": 2}
RATE = {"max_digits": 10, "decimal_places": 2}
SHARE = {"max_digits": 4, "decimal_places": 3}


class ChargeBasis(models.TextChoices):
    USED = "used", "Time used (check-in to check-out)"
    BOOKED = "booked", "Time booked"
    GREATER = "greater", "The greater of booked and used time"


class Holiday(models.Model):
    """A public holiday: the whole day counts as out of hours in the facility calendar."""

    day = models.DateField(unique=True)
    name = models.CharField(max_length=120)

    class Meta:
        ordering = ["day"]

    def __str__(self) -> str:
        return f"{self.day:%Y-%m-%d} {self.name}"


class Tariff(models.Model):
    """The price of an hour on one instrument for one rate category and purpose, from a date.

    Versions of the same (instrument, rate category, purpose) never overlap; the one in force on
    the local date a session starts prices it. Once a finalised line uses a version it is never
    edited: a new version is added instead (services.add_tariff).
    """

    instrument = models.ForeignKey(Instrument, on_delete=models.PROTECT, related_name="tariffs")
    rate_category = models.CharField(max_length=20, choices=RateCategory.choices)
    purpose = models.CharField(max_length=10, choices=Purpose.choices)
    hourly_rate = models.DecimalField(**RATE)
    staff_hourly_rate = models.DecimalField(
        **RATE, default=Decimal("0.00"), help_text="Rate for logged staff time (assisted use)."
    )
    currency = models.CharField(max_length=3, default="EUR", help_text="ISO 4217 code.")
    increment_minutes = models.PositiveSmallIntegerField(
        default=15, help_text="Time is rounded up to a multiple of this."
    )
    minimum_charge = models.DecimalField(**RATE, default=Decimal("0.00"))
    out_of_hours_factor = models.DecimalField(
        max_digits=5,
        decimal_places=3,
        default=Decimal("1.000"),
        help_text="Multiplies the hourly rate outside normal hours, at weekends and on holidays.",
    )
    charge_basis = models.CharField(
        max_length=8, choices=ChargeBasis.choices, default=ChargeBasis.USED
    )
    late_cancellation_share = models.DecimalField(
        **SHARE, default=Decimal("0.000"), help_text="Share of the booked time charged (0–1)."
    )
    no_show_share = models.DecimalField(
        **SHARE, default=Decimal("0.000"), help_text="Share of the booked time charged (0–1)."
    )
    valid_from = models.DateField()
    valid_to = models.DateField(null=True, blank=True, help_text="Last day; empty = open-ended.")
    note = models.CharField(max_length=200, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )

    history = HistoricalRecords()

    class Meta:
        ordering = ["instrument", "rate_category", "purpose", "valid_from"]
        constraints = [
            models.UniqueConstraint(
                fields=["instrument", "rate_category", "purpose", "valid_from"],
                name="tariff_unique_version_start",
            ),
            models.CheckConstraint(
                condition=Q(valid_to__isnull=True) | Q(valid_to__gte=F("valid_from")),
                name="tariff_valid_to_after_from",
            ),
            models.CheckConstraint(
                condition=Q(hourly_rate__gte=0) & Q(staff_hourly_rate__gte=0),
                name="tariff_rates_nonnegative",
            ),
            models.CheckConstraint(
                condition=Q(minimum_charge__gte=0), name="tariff_minimum_nonnegative"
            ),
            models.CheckConstraint(
                condition=Q(increment_minutes__gte=1) & Q(increment_minutes__lte=1440),
                name="tariff_increment_range",
            ),
            models.CheckConstraint(
                condition=Q(out_of_hours_factor__gt=0), name="tariff_out_of_hours_factor_positive"
            ),
            models.CheckConstraint(
                condition=Q(late_cancellation_share__gte=0)
                & Q(late_cancellation_share__lte=1)
                & Q(no_show_share__gte=0)
                & Q(no_show_share__lte=1),
                name="tariff_shares_in_unit_range",
            ),
            models.CheckConstraint(
                condition=Q(rate_category__in=[c.value for c in RateCategory]),
                name="tariff_rate_category_known",
            ),
            models.CheckConstraint(
                condition=Q(purpose__in=[p.value for p in Purpose]), name="tariff_purpose_known"
            ),
            models.CheckConstraint(
                condition=Q(charge_basis__in=[b.value for b in ChargeBasis]),
                name="tariff_charge_basis_known",
            ),
            # Overlapping versions are refused by an exclusion constraint on PostgreSQL
            # (migration 0002) and by services.add_tariff everywhere.
        ]

    def __str__(self) -> str:
        until = f"{self.valid_to:%Y-%m-%d}" if self.valid_to else "…"
        return (
            f"{self.instrument.code} {self.rate_category}/{self.purpose} "
            f"{self.hourly_rate} {self.currency}/h ({self.valid_from:%Y-%m-%d}–{until})"
        )


class StatementState(models.TextChoices):
    DRAFT = "draft", "Draft"
    FINAL = "final", "Final"


class Statement(models.Model):
    """What one account owes for one calendar month (facility time zone)."""

    account = models.ForeignKey(Account, on_delete=models.PROTECT, related_name="statements")
    month = models.DateField(help_text="First day of the month billed.")
    state = models.CharField(
        max_length=5, choices=StatementState.choices, default=StatementState.DRAFT
    )
    number = models.PositiveIntegerField(
        null=True, blank=True, unique=True, help_text="Given at finalisation, in sequence."
    )
    currency = models.CharField(max_length=3, blank=True)
    total = models.DecimalField(**MONEY, default=Decimal("0.00"))
    checksum = models.CharField(max_length=64, blank=True, help_text="SHA-256 over the lines.")
    problems = models.JSONField(
        default=list, blank=True, help_text="Why the draft cannot be finalised yet."
    )
    drafted_at = models.DateTimeField(null=True, blank=True)
    finalised_at = models.DateTimeField(null=True, blank=True)
    finalised_by = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="+",
    )

    history = HistoricalRecords()

    class Meta:
        ordering = ["-month", "account"]
        constraints = [
            models.UniqueConstraint(fields=["account", "month"], name="statement_one_per_month"),
            models.CheckConstraint(
                condition=Q(state__in=[s.value for s in StatementState]),
                name="statement_state_known",
            ),
            models.CheckConstraint(
                condition=(
                    Q(state="draft")
                    & Q(number__isnull=True)
                    & Q(finalised_at__isnull=True)
                    & Q(checksum="")
                )
                | (
                    Q(state="final")
                    & Q(number__isnull=False)
                    & Q(finalised_at__isnull=False)
                    & Q(finalised_by__isnull=False)
                    & ~Q(checksum="")
                ),
                name="statement_final_is_numbered_and_sealed",
            ),
        ]

    def __str__(self) -> str:
        label = self.reference if self.is_final else "draft"
        return f"{self.account.code} {self.month:%Y-%m} ({label})"

    @property
    def is_final(self) -> bool:
        return self.state == StatementState.FINAL

    @property
    def reference(self) -> str:
        """The printed statement number, e.g. 'S-000042'; empty for a draft."""
        return f"S-{self.number:06d}" if self.number else ""


class ChargeKind(models.TextChoices):
    USE = "use", "Instrument use"
    LATE_CANCELLATION = "late_cancellation", "Late cancellation"
    NO_SHOW = "no_show", "No-show"
    ADJUSTMENT = "adjustment", "Adjustment"


class Charge(models.Model):
    """One line of a statement: a priced session, a priced booking, or a manual adjustment.

    A session or booking is on at most one line of all statements (the two unique constraints),
    so concurrent drafting cannot bill it twice.
    """

    statement = models.ForeignKey(Statement, on_delete=models.CASCADE, related_name="lines")
    position = models.PositiveIntegerField(help_text="Order of the line on its statement.")
    kind = models.CharField(max_length=20, choices=ChargeKind.choices)
    session = models.ForeignKey(
        InstrumentSession, null=True, blank=True, on_delete=models.PROTECT, related_name="charges"
    )
    booking = models.ForeignKey(
        Booking, null=True, blank=True, on_delete=models.PROTECT, related_name="charges"
    )
    tariff = models.ForeignKey(
        Tariff, null=True, blank=True, on_delete=models.PROTECT, related_name="charges"
    )
    instrument = models.ForeignKey(
        Instrument, null=True, blank=True, on_delete=models.PROTECT, related_name="charges"
    )
    user = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="charges",
        help_text="Who used (or booked) the time.",
    )
    purpose = models.CharField(max_length=10, choices=Purpose.choices, blank=True)
    starts_at = models.DateTimeField(null=True, blank=True, help_text="Start of the priced time.")
    ends_at = models.DateTimeField(null=True, blank=True)
    billed_minutes = models.PositiveIntegerField(default=0, help_text="After rounding up.")
    out_of_hours_minutes = models.PositiveIntegerField(default=0)
    staff_minutes = models.PositiveIntegerField(default=0, help_text="Billed staff time.")
    hourly_rate = models.DecimalField(**RATE, null=True, blank=True)
    staff_hourly_rate = models.DecimalField(**RATE, null=True, blank=True)
    out_of_hours_factor = models.DecimalField(max_digits=5, decimal_places=3, null=True, blank=True)
    share = models.DecimalField(**SHARE, null=True, blank=True)
    currency = models.CharField(max_length=3)
    amount = models.DecimalField(**MONEY)
    description = models.CharField(max_length=300)
    reason = models.CharField(max_length=300, blank=True, help_text="Why (adjustments).")
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="+",
        help_text="Who made the adjustment.",
    )
    corrects = models.ForeignKey(
        Statement,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="corrections",
        help_text="The finalised statement an adjustment corrects.",
    )
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["statement", "position", "id"]
        indexes = [models.Index(fields=["statement", "position"])]
        constraints = [
            models.UniqueConstraint(
                fields=["session"], condition=Q(session__isnull=False), name="charge_session_once"
            ),
            models.UniqueConstraint(
                fields=["booking"], condition=Q(booking__isnull=False), name="charge_booking_once"
            ),
            models.CheckConstraint(
                condition=Q(kind__in=[k.value for k in ChargeKind]), name="charge_kind_known"
            ),
            models.CheckConstraint(
                condition=~Q(kind="use") | (Q(session__isnull=False) & Q(tariff__isnull=False)),
                name="charge_use_has_session_and_tariff",
            ),
            models.CheckConstraint(
                condition=~Q(kind__in=["late_cancellation", "no_show"])
                | (Q(booking__isnull=False) & Q(session__isnull=True) & Q(tariff__isnull=False)),
                name="charge_booking_line_has_booking",
            ),
            models.CheckConstraint(
                condition=~Q(kind="adjustment")
                | (
                    Q(session__isnull=True)
                    & Q(booking__isnull=True)
                    & ~Q(reason="")
                    & Q(created_by__isnull=False)
                ),
                name="charge_adjustment_has_reason_and_author",
            ),
            models.CheckConstraint(
                condition=Q(kind="adjustment") | Q(amount__gte=0),
                name="charge_priced_amount_nonnegative",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.get_kind_display()} {self.amount} {self.currency}"


class StatementSequence(models.Model):
    """The counter that numbers final statements; its row is locked while a number is taken."""

    name = models.CharField(max_length=20, primary_key=True)
    last_number = models.PositiveIntegerField(default=0)

    def __str__(self) -> str:
        return f"{self.name}: {self.last_number}"
