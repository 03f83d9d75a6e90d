"""The instruments, their pumps, and who is trained to use them."""

from __future__ import annotations

import datetime as dt

from django.conf import settings
from django.db import models
from django.db.models import F, Q


class InstrumentKind(models.TextChoices):
    SEM = "SEM", "Scanning electron microscope"
    ESEM = "ESEM", "Environmental / variable-pressure SEM"
    TEM = "TEM", "Transmission electron microscope"
    COATER = "coater", "Coater"
    OTHER = "other", "Other"


class EmitterType(models.TextChoices):
    TUNGSTEN = "tungsten", "Tungsten hairpin"
    LAB6 = "lab6", "LaB6"
    SCHOTTKY = "schottky", "Schottky field emission"
    COLD_FE = "cold_fe", "Cold field emission"
    NONE = "none", "No emitter"


class VacuumMode(models.TextChoices):
    HIGH = "high", "High vacuum"
    LOW = "low", "Low vacuum / variable pressure"
    ENVIRONMENTAL = "environmental", "Environmental"


class Instrument(models.Model):
    code = models.SlugField(
        max_length=40, unique=True, help_text="Short name used in URLs and scripts."
    )
    name = models.CharField(max_length=120)
    kind = models.CharField(max_length=10, choices=InstrumentKind.choices)
    emitter_type = models.CharField(
        max_length=10, choices=EmitterType.choices, default=EmitterType.NONE
    )
    location = models.CharField(max_length=120, blank=True)
    vacuum_modes = models.JSONField(
        default=list, blank=True, help_text='Vacuum modes offered, e.g. ["high", "low"].'
    )
    # {"<kV>": <nm>} as given on the instrument's acceptance sheet, e.g. {"1": 1.6, "15": 0.8}.
    expected_resolution_nm = models.JSONField(
        default=dict,
        blank=True,
        help_text='Expected resolution (nm) by voltage (kV), e.g. {"15": 1.0}.',
    )
    magnification_reference_width_mm = models.FloatField(
        null=True,
        blank=True,
        help_text="Display width that magnification refers to; used for pixel size only when the "
        "image carries no better source.",
    )
    metadata_mapping = models.JSONField(
        default=dict,
        blank=True,
        help_text='Extra names in this instrument\'s image text blocks: {"key": {"field": '
        '"accelerating_voltage_kv", "unit": "kV"}}.',
    )
    bookable_from = models.TimeField(default=dt.time(8, 0), help_text="Start of normal hours.")
    bookable_until = models.TimeField(default=dt.time(18, 0), help_text="End of normal hours.")
    bookable_weekdays = models.JSONField(
        default=list,
        blank=True,
        help_text="ISO weekdays of normal hours (1 = Monday); empty = Mon–Fri.",
    )
    allows_out_of_hours = models.BooleanField(
        default=True, help_text="Users with the out-of-hours level may book outside normal hours."
    )
    max_booking_minutes = models.PositiveIntegerField(default=8 * 60)
    cancellation_deadline_hours = models.PositiveIntegerField(
        default=24, help_text="Cancelling later than this before the start is a late cancellation."
    )
    out_of_service = models.BooleanField(default=False)
    is_active = models.BooleanField(default=True)

    class Meta:
        ordering = ["name"]
        constraints = [
            models.CheckConstraint(
                condition=Q(bookable_until__gt=F("bookable_from")),
                name="instrument_bookable_window_positive",
            ),
            models.CheckConstraint(
                condition=Q(max_booking_minutes__gt=0), name="instrument_max_booking_positive"
            ),
            models.CheckConstraint(
                condition=Q(magnification_reference_width_mm__isnull=True)
                | Q(magnification_reference_width_mm__gt=0),
                name="instrument_reference_width_positive",
            ),
        ]

    def __str__(self) -> str:
        return self.name

    @property
    def normal_weekdays(self) -> list[int]:
        return list(self.bookable_weekdays) or [1, 2, 3, 4, 5]


class PumpKind(models.TextChoices):
    ROTARY = "rotary", "Rotary vane"
    SCROLL = "scroll", "Scroll"
    TURBO = "turbo", "Turbomolecular"
    ION_GETTER = "ion_getter", "Ion getter"
    DIFFUSION = "diffusion", "Diffusion"
    OTHER = "other", "Other"


class Pump(models.Model):
    instrument = models.ForeignKey(Instrument, on_delete=models.CASCADE, related_name="pumps")
    name = models.CharField(max_length=80)
    kind = models.CharField(max_length=12, choices=PumpKind.choices)
    # Ion getter pumps and the turbo on a field-emission column run all the time: their hours are
    # calendar time, not chamber time.
    runs_continuously = models.BooleanField(default=False)
    installed_on = models.DateField()

    class Meta:
        ordering = ["instrument", "name"]
        constraints = [
            models.UniqueConstraint(fields=["instrument", "name"], name="pump_unique_name")
        ]

    def __str__(self) -> str:
        return f"{self.instrument.code}: {self.name}"


class TrainingLevel(models.IntegerChoices):
    # Ordered: a higher level includes what the lower ones allow.
    SUPERVISED = 1, "Supervised"
    INDEPENDENT = 2, "Independent"
    OUT_OF_HOURS = 3, "Out of hours"


class TrainingRecord(models.Model):
    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="training_records"
    )
    instrument = models.ForeignKey(
        Instrument, on_delete=models.CASCADE, related_name="training_records"
    )
    level = models.PositiveSmallIntegerField(choices=TrainingLevel.choices)
    granted_on = models.DateField()
    expires_on = models.DateField(null=True, blank=True, help_text="Empty means no expiry.")
    granted_by = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.SET_NULL,
        related_name="+",
    )

    class Meta:
        ordering = ["instrument", "user"]
        constraints = [
            models.UniqueConstraint(fields=["user", "instrument"], name="training_unique_user"),
            models.CheckConstraint(
                condition=Q(expires_on__isnull=True) | Q(expires_on__gte=F("granted_on")),
                name="training_expiry_after_grant",
            ),
            models.CheckConstraint(condition=Q(level__in=[1, 2, 3]), name="training_level_known"),
        ]

    def __str__(self) -> str:
        return f"{self.user} on {self.instrument.code}: {self.get_level_display()}"

    def valid_on(self, day: dt.date) -> bool:
        return self.granted_on <= day and (self.expires_on is None or day <= self.expires_on)
