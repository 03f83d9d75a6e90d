"""Upkeep: service events, the instrument's own meter readings, limits and the alerts they raise.

Counters themselves (emitter hours, pump hours, vent cycles) are never stored: they are derived from
the logbook on demand (counters.py). What is stored here is only what a person tells us — a part was
changed, the meter said this, the part is rated for that — and the record that an alert went out.
"""

from __future__ import annotations

from django.conf import settings
from django.db import models
from django.db.models import Q
from simple_history.models import HistoricalRecords

from facility.instruments.models import Instrument, Pump


class Counter(models.TextChoices):
    EMITTER_HOURS = "emitter_hours", "Emitter hours"
    PUMP_HOURS = "pump_hours", "Pump hours"
    VENT_CYCLES = "vent_cycles", "Vent cycles"


# Counters an instrument shows on its own hour meter; vent cycles come from the logbook only.
METERED_COUNTERS = (Counter.EMITTER_HOURS, Counter.PUMP_HOURS)


class ServiceKind(models.TextChoices):
    EMITTER_CHANGE = "emitter_change", "Emitter change"
    PUMP_SERVICE = "pump_service", "Pump service"
    PUMP_REPLACEMENT = "pump_replacement", "Pump replacement"
    PART_REPLACEMENT = "part_replacement", "Wear part replaced (per vent cycle)"
    BAKE_OUT = "bake_out", "Bake-out"
    ALIGNMENT = "alignment", "Alignment"
    OTHER = "other", "Other"


PUMP_KINDS = (ServiceKind.PUMP_SERVICE, ServiceKind.PUMP_REPLACEMENT)


class ServiceEvent(models.Model):
    """Something done to an instrument. An emitter change, pump service or part replacement starts
    that counter again from `performed_at`."""

    instrument = models.ForeignKey(
        Instrument, on_delete=models.PROTECT, related_name="service_events"
    )
    kind = models.CharField(max_length=20, choices=ServiceKind.choices)
    pump = models.ForeignKey(
        Pump,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="service_events",
        help_text="The pump serviced or replaced (pump events only).",
    )
    part = models.SlugField(
        max_length=60,
        blank=True,
        help_text="Wear part replaced, e.g. chamber-door-seal (part replacements only); "
        "matches the part of a vent-cycle limit.",
    )
    performed_at = models.DateTimeField()
    performed_by = models.CharField(
        max_length=120, blank=True, help_text="Who did the work: staff member or service engineer."
    )
    recorded_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    notes = models.TextField(blank=True)
    cost = models.DecimalField(max_digits=10, decimal_places=2, null=True, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)

    history = HistoricalRecords()

    class Meta:
        ordering = ["-performed_at"]
        indexes = [models.Index(fields=["instrument", "kind", "performed_at"])]
        constraints = [
            models.CheckConstraint(
                condition=Q(kind__in=[k.value for k in ServiceKind]), name="service_kind_known"
            ),
            models.CheckConstraint(
                condition=(Q(kind__in=PUMP_KINDS) & Q(pump__isnull=False))
                | (~Q(kind__in=PUMP_KINDS) & Q(pump__isnull=True)),
                name="service_pump_only_for_pump_events",
            ),
            models.CheckConstraint(
                condition=(Q(kind=ServiceKind.PART_REPLACEMENT) & ~Q(part=""))
                | (~Q(kind=ServiceKind.PART_REPLACEMENT) & Q(part="")),
                name="service_part_only_for_part_replacement",
            ),
            models.CheckConstraint(
                condition=Q(cost__isnull=True) | Q(cost__gte=0), name="service_cost_nonnegative"
            ),
        ]

    def __str__(self) -> str:
        what = self.get_kind_display()
        if self.pump_id:
            what += f" ({self.pump.name})"
        elif self.part:
            what += f" ({self.part})"
        return f"{self.instrument.code} {self.performed_at:%Y-%m-%d}: {what}"


class MeterReading(models.Model):
    """What the instrument's own hour meter showed: hours on the current emitter or pump.

    From `read_at` on, the reading wins over the derived counter; the difference is the drift.
    """

    instrument = models.ForeignKey(
        Instrument, on_delete=models.PROTECT, related_name="meter_readings"
    )
    counter = models.CharField(max_length=16, choices=Counter.choices)
    pump = models.ForeignKey(
        Pump, null=True, blank=True, on_delete=models.PROTECT, related_name="meter_readings"
    )
    value = models.DecimalField(max_digits=10, decimal_places=2, help_text="Hours on the meter.")
    read_at = models.DateTimeField()
    recorded_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    note = models.CharField(max_length=300, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)

    history = HistoricalRecords()

    class Meta:
        ordering = ["-read_at"]
        indexes = [models.Index(fields=["instrument", "counter", "read_at"])]
        constraints = [
            models.CheckConstraint(
                condition=Q(counter__in=[c.value for c in METERED_COUNTERS]),
                name="reading_counter_is_metered",
            ),
            models.CheckConstraint(
                condition=(Q(counter=Counter.PUMP_HOURS) & Q(pump__isnull=False))
                | (~Q(counter=Counter.PUMP_HOURS) & Q(pump__isnull=True)),
                name="reading_pump_only_for_pump_hours",
            ),
            models.CheckConstraint(condition=Q(value__gte=0), name="reading_value_nonnegative"),
            models.UniqueConstraint(
                fields=["instrument", "counter", "read_at"],
                condition=Q(pump__isnull=True),
                name="reading_unique_time",
            ),
            models.UniqueConstraint(
                fields=["pump", "read_at"],
                condition=Q(pump__isnull=False),
                name="reading_unique_pump_time",
            ),
        ]

    def __str__(self) -> str:
        what = self.pump.name if self.pump_id else self.get_counter_display()
        return f"{self.instrument.code} {self.read_at:%Y-%m-%d}: {what} {self.value} h"


class Limit(models.Model):
    """The facility's rating for one wearing part of an instrument and when to warn about it.

    Without a row the counter falls back to the default for its emitter type (defaults.py), shown as
    a default for the facility to replace.
    """

    instrument = models.ForeignKey(Instrument, on_delete=models.CASCADE, related_name="limits")
    counter = models.CharField(max_length=16, choices=Counter.choices)
    pump = models.ForeignKey(
        Pump, null=True, blank=True, on_delete=models.CASCADE, related_name="limits"
    )
    part = models.SlugField(
        max_length=60,
        blank=True,
        help_text="Wear part counted in vent cycles, e.g. chamber-door-seal.",
    )
    rated = models.DecimalField(
        max_digits=10, decimal_places=1, help_text="Rated life: hours, or vent cycles."
    )
    warn_percent = models.PositiveSmallIntegerField(
        default=80, help_text="Warn staff when the counter passes this share of the rating."
    )
    note = models.CharField(max_length=300, blank=True, help_text="Where the rating comes from.")
    set_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    updated_at = models.DateTimeField(auto_now=True)

    history = HistoricalRecords()

    class Meta:
        ordering = ["instrument", "counter", "part"]
        constraints = [
            models.CheckConstraint(condition=Q(rated__gt=0), name="limit_rated_positive"),
            models.CheckConstraint(
                condition=Q(warn_percent__gte=1) & Q(warn_percent__lte=100),
                name="limit_warn_percent_range",
            ),
            models.CheckConstraint(
                condition=(Q(counter=Counter.PUMP_HOURS) & Q(pump__isnull=False))
                | (~Q(counter=Counter.PUMP_HOURS) & Q(pump__isnull=True)),
                name="limit_pump_only_for_pump_hours",
            ),
            models.CheckConstraint(
                condition=(Q(counter=Counter.VENT_CYCLES) & ~Q(part=""))
                | (~Q(counter=Counter.VENT_CYCLES) & Q(part="")),
                name="limit_part_only_for_vent_cycles",
            ),
            models.UniqueConstraint(
                fields=["instrument", "counter", "part"],
                condition=Q(pump__isnull=True),
                name="limit_unique_part",
            ),
            models.UniqueConstraint(
                fields=["pump"], condition=Q(pump__isnull=False), name="limit_unique_pump"
            ),
        ]

    def __str__(self) -> str:
        what = self.pump.name if self.pump_id else (self.part or self.get_counter_display())
        return f"{self.instrument.code}: {what} rated {self.rated:g}"


class AlertLevel(models.TextChoices):
    # Ordered by urgency: one message per check names the most urgent new crossing.
    FORECAST = "forecast", "Limit forecast soon"
    WARN = "warn", "Past the warn level"
    LIMIT = "limit", "Past the rated life"


ALERT_ORDER = {AlertLevel.FORECAST: 1, AlertLevel.WARN: 2, AlertLevel.LIMIT: 3}


class Alert(models.Model):
    """One threshold crossing of one counter, raised once.

    `topic` names the crossing — counter, the part's life since its last reset, threshold and rating —
    and is unique, so the daily check that sees the same crossing again writes and sends nothing.
    """

    topic = models.CharField(max_length=200, unique=True)
    counter_key = models.CharField(max_length=120, db_index=True)
    instrument = models.ForeignKey(Instrument, on_delete=models.CASCADE, related_name="alerts")
    counter = models.CharField(max_length=16, choices=Counter.choices)
    pump = models.ForeignKey(
        Pump, null=True, blank=True, on_delete=models.CASCADE, related_name="alerts"
    )
    part = models.SlugField(max_length=60, blank=True)
    level = models.CharField(max_length=10, choices=AlertLevel.choices)
    value = models.FloatField()
    rated = models.FloatField()
    forecast_on = models.DateField(null=True, blank=True)
    message = models.CharField(max_length=300)
    raised_at = models.DateTimeField()
    resolved_at = models.DateTimeField(
        null=True, blank=True, help_text="Set when the part is changed or serviced."
    )
    acknowledged_at = models.DateTimeField(null=True, blank=True)
    acknowledged_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )

    class Meta:
        ordering = ["-raised_at"]
        constraints = [
            models.CheckConstraint(
                condition=Q(level__in=[lv.value for lv in AlertLevel]), name="alert_level_known"
            )
        ]

    def __str__(self) -> str:
        return self.message
