"""Bookings: a claim on an instrument for a time range, on an account."""

from __future__ import annotations

from django.conf import settings
from django.db import models
from django.db.models import F, Q
from simple_history.models import HistoricalRecords

from facility.instruments.models import Instrument
from facility.people.models import Account


class Purpose(models.TextChoices):
    OWN_USE = "own_use", "Own use"
    ASSISTED = "assisted", "Assisted by staff"
    TRAINING = "training", "Training"
    SERVICE = "service", "Service / maintenance"


class BookingState(models.TextChoices):
    REQUESTED = "requested", "Requested"
    CONFIRMED = "confirmed", "Confirmed"
    CANCELLED = "cancelled", "Cancelled"
    LATE_CANCELLED = "late_cancelled", "Cancelled late"
    NO_SHOW = "no_show", "No-show"
    DONE = "done", "Done"


# States that hold the instrument's time: no other booking may overlap them.
LIVE_STATES = (BookingState.REQUESTED, BookingState.CONFIRMED, BookingState.DONE)


class Booking(models.Model):
    instrument = models.ForeignKey(Instrument, on_delete=models.PROTECT, related_name="bookings")
    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="bookings"
    )
    account = models.ForeignKey(Account, on_delete=models.PROTECT, related_name="bookings")
    starts_at = models.DateTimeField()
    ends_at = models.DateTimeField()
    purpose = models.CharField(max_length=10, choices=Purpose.choices, default=Purpose.OWN_USE)
    state = models.CharField(
        max_length=16, choices=BookingState.choices, default=BookingState.CONFIRMED
    )
    note = models.CharField(max_length=300, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    cancelled_at = models.DateTimeField(null=True, blank=True)
    # Client-chosen key so a script that retries a POST does not book twice.
    idempotency_key = models.CharField(max_length=80, blank=True)

    history = HistoricalRecords()

    class Meta:
        ordering = ["starts_at"]
        indexes = [models.Index(fields=["instrument", "starts_at"])]
        constraints = [
            # Half-open [start, end): an empty or reversed range is refused.
            models.CheckConstraint(
                condition=Q(ends_at__gt=F("starts_at")), name="booking_ends_after_start"
            ),
            models.CheckConstraint(
                condition=Q(state__in=[s.value for s in BookingState]), name="booking_state_known"
            ),
            models.CheckConstraint(
                condition=Q(purpose__in=[p.value for p in Purpose]), name="booking_purpose_known"
            ),
            models.CheckConstraint(
                condition=Q(cancelled_at__isnull=True)
                | Q(state__in=[BookingState.CANCELLED, BookingState.LATE_CANCELLED]),
                name="booking_cancelled_at_only_when_cancelled",
            ),
            models.UniqueConstraint(
                fields=["user", "idempotency_key"],
                condition=~Q(idempotency_key=""),
                name="booking_unique_idempotency_key",
            ),
            # The no-overlap rule is an exclusion constraint on PostgreSQL, added by migration
            # 0002 (Django has no portable form of it); on SQLite the service checks it inside an
            # IMMEDIATE transaction.
        ]

    def __str__(self) -> str:
        return f"{self.instrument.code} {self.starts_at:%Y-%m-%d %H:%M} ({self.user})"

    @property
    def is_live(self) -> bool:
        return self.state in LIVE_STATES

    @property
    def duration_hours(self) -> float:
        return (self.ends_at - self.starts_at).total_seconds() / 3600
