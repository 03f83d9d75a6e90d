"""The logbook: what happened at the instrument, on which specimen, with which settings and images."""

from __future__ import annotations

from django.conf import settings
from django.db import models
from django.db.models import F, Q
from simple_history.models import HistoricalRecords

from facility.bookings.models import Booking, Purpose
from facility.instruments.models import Instrument, VacuumMode
from facility.people.models import Account, Group


class MaterialClass(models.TextChoices):
    METAL = "metal", "Metal"
    CERAMIC = "ceramic", "Ceramic / oxide / glass"
    POLYMER = "polymer", "Polymer"
    BIOLOGICAL = "biological", "Biological"
    SEMICONDUCTOR = "semiconductor", "Semiconductor"
    COMPOSITE = "composite", "Composite"
    MINERAL = "mineral", "Mineral"


class Conductivity(models.TextChoices):
    CONDUCTING = "conducting", "Conducting"
    SEMICONDUCTING = "semiconducting", "Semiconducting"
    INSULATING = "insulating", "Insulating"


class SpecimenForm(models.TextChoices):
    POWDER = "powder", "Powder"
    PARTICLES_ON_FILM = "particles_on_film", "Particles on film"
    BULK = "bulk", "Bulk"
    THIN_FILM = "thin_film", "Thin film"
    FIBRE = "fibre", "Fibre"
    MEMBRANE = "membrane", "Membrane"
    HYDROGEL = "hydrogel", "Hydrogel or wet"


class Specimen(models.Model):
    name = models.CharField(max_length=160)
    material = models.CharField(max_length=160, help_text="e.g. porous alumina, PCL fibres.")
    # Indexed: the finder narrows its search by these.
    material_class = models.CharField(max_length=16, choices=MaterialClass.choices, db_index=True)
    conductivity = models.CharField(max_length=16, choices=Conductivity.choices, db_index=True)
    form = models.CharField(max_length=20, choices=SpecimenForm.choices, db_index=True)
    feature_size_nm = models.FloatField(
        null=True, blank=True, help_text="Size of the smallest feature of interest, in nm."
    )
    beam_sensitive = models.BooleanField(default=False)
    e2_kev = models.FloatField(
        null=True,
        blank=True,
        help_text="Second crossover energy E2 (keV), where known; used for the charging-risk check.",
    )
    preparation = models.TextField(blank=True)
    tags = models.JSONField(default=list, blank=True)
    notes = models.TextField(blank=True)
    owner = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="specimens"
    )
    group = models.ForeignKey(Group, on_delete=models.PROTECT, related_name="specimens")
    created_at = models.DateTimeField(auto_now_add=True)
    # Every save moves it: readers that keep a copy of logbook rows (the finder's digest) find
    # what changed since they last looked by this, without the logbook having to tell them.
    updated_at = models.DateTimeField(auto_now=True, db_index=True)

    class Meta:
        ordering = ["-created_at"]
        constraints = [
            models.CheckConstraint(
                condition=Q(feature_size_nm__isnull=True) | Q(feature_size_nm__gt=0),
                name="specimen_feature_size_positive",
            ),
            models.CheckConstraint(
                condition=Q(e2_kev__isnull=True) | Q(e2_kev__gt=0), name="specimen_e2_positive"
            ),
        ]

    def __str__(self) -> str:
        return self.name


class CoatingMaterial(models.TextChoices):
    NONE = "none", "None"
    AU = "Au", "Gold"
    AU_PD = "Au-Pd", "Gold–palladium"
    PT = "Pt", "Platinum"
    IR = "Ir", "Iridium"
    CR = "Cr", "Chromium"
    C = "C", "Carbon"


class CoatingMethod(models.TextChoices):
    SPUTTER = "sputter", "Sputtered"
    EVAPORATION = "evaporation", "Evaporated"
    NONE = "none", "Not coated"


class Coating(models.Model):
    specimen = models.ForeignKey(Specimen, on_delete=models.CASCADE, related_name="coatings")
    material = models.CharField(max_length=8, choices=CoatingMaterial.choices)
    thickness_nm = models.FloatField(default=0)
    method = models.CharField(
        max_length=12, choices=CoatingMethod.choices, default=CoatingMethod.SPUTTER
    )
    applied_at = models.DateTimeField(null=True, blank=True)
    updated_at = models.DateTimeField(auto_now=True, db_index=True)  # as Specimen.updated_at

    class Meta:
        constraints = [
            models.CheckConstraint(
                condition=Q(thickness_nm__gte=0) & Q(thickness_nm__lte=1000),
                name="coating_thickness_range",
            ),
            models.CheckConstraint(
                condition=~Q(material="none") | Q(thickness_nm=0),
                name="coating_none_has_no_thickness",
            ),
            models.CheckConstraint(
                condition=Q(material="none") | Q(thickness_nm__gt=0),
                name="coating_material_has_thickness",
            ),
        ]

    def __str__(self) -> str:
        if self.material == CoatingMaterial.NONE:
            return "uncoated"
        return f"{self.thickness_nm:g} nm {self.material}"


class InstrumentSession(models.Model):
    """A logbook entry: one person's time at one instrument, from check-in to check-out."""

    instrument = models.ForeignKey(Instrument, on_delete=models.PROTECT, related_name="sessions")
    operator = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="instrument_sessions"
    )
    account = models.ForeignKey(Account, on_delete=models.PROTECT, related_name="sessions")
    booking = models.OneToOneField(
        Booking, null=True, blank=True, on_delete=models.SET_NULL, related_name="session"
    )
    purpose = models.CharField(max_length=10, choices=Purpose.choices, default=Purpose.OWN_USE)
    started_at = models.DateTimeField()
    ended_at = models.DateTimeField(null=True, blank=True)
    beam_on_hours = models.DecimalField(max_digits=7, decimal_places=2, null=True, blank=True)
    vent_cycles = models.PositiveIntegerField(default=0)
    staff_minutes = models.PositiveIntegerField(
        default=0, help_text="Staff time spent assisting (billed at the staff rate)."
    )
    vacuum_mode = models.CharField(
        max_length=16, choices=VacuumMode.choices, default=VacuumMode.HIGH
    )
    specimen = models.ForeignKey(
        Specimen, null=True, blank=True, on_delete=models.SET_NULL, related_name="sessions"
    )
    coating = models.ForeignKey(
        Coating, null=True, blank=True, on_delete=models.SET_NULL, related_name="sessions"
    )
    notes = models.TextField(blank=True)
    fault_report = models.TextField(blank=True)
    idempotency_key = models.CharField(max_length=80, blank=True)
    updated_at = models.DateTimeField(auto_now=True, db_index=True)  # as Specimen.updated_at

    history = HistoricalRecords()

    class Meta:
        ordering = ["-started_at"]
        indexes = [models.Index(fields=["instrument", "started_at"])]
        constraints = [
            models.UniqueConstraint(
                fields=["instrument"],
                condition=Q(ended_at__isnull=True),
                name="session_one_open_per_instrument",
            ),
            models.CheckConstraint(
                condition=Q(ended_at__isnull=True) | Q(ended_at__gt=F("started_at")),
                name="session_ends_after_start",
            ),
            models.CheckConstraint(
                condition=Q(beam_on_hours__isnull=True) | Q(beam_on_hours__gte=0),
                name="session_beam_on_nonnegative",
            ),
            models.CheckConstraint(
                condition=Q(ended_at__isnull=False) | Q(beam_on_hours__isnull=True),
                name="session_beam_on_only_when_closed",
            ),
            models.UniqueConstraint(
                fields=["operator", "idempotency_key"],
                condition=~Q(idempotency_key=""),
                name="session_unique_idempotency_key",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.instrument.code} {self.started_at:%Y-%m-%d %H:%M} ({self.operator})"

    @property
    def is_open(self) -> bool:
        return self.ended_at is None

    @property
    def hours(self) -> float | None:
        if self.ended_at is None:
            return None
        return (self.ended_at - self.started_at).total_seconds() / 3600


class ConditionsSource(models.TextChoices):
    LOGGED = "logged", "Logged by the operator"
    IMAGE = "image", "Read from an image"
    SUGGESTED = "suggested", "Copied from a suggestion"


class Conditions(models.Model):
    """One set of beam and detector settings used during a session (a session may have several)."""

    session = models.ForeignKey(
        InstrumentSession, on_delete=models.CASCADE, related_name="conditions"
    )
    label = models.CharField(max_length=80, blank=True)
    accelerating_voltage_kv = models.FloatField(null=True, blank=True)
    working_distance_mm = models.FloatField(null=True, blank=True)
    probe_current_na = models.FloatField(null=True, blank=True)
    spot_size = models.FloatField(null=True, blank=True)
    aperture_um = models.FloatField(null=True, blank=True)
    detector = models.CharField(max_length=60, blank=True)
    dwell_time_us = models.FloatField(null=True, blank=True)
    magnification = models.FloatField(null=True, blank=True)
    vacuum_mode = models.CharField(max_length=16, choices=VacuumMode.choices, blank=True)
    chamber_pressure_pa = models.FloatField(null=True, blank=True)
    tilt_deg = models.FloatField(null=True, blank=True)
    source = models.CharField(
        max_length=10, choices=ConditionsSource.choices, default=ConditionsSource.LOGGED
    )
    created_at = models.DateTimeField(auto_now_add=True)

    history = HistoricalRecords()

    class Meta:
        verbose_name_plural = "conditions"
        ordering = ["session", "id"]
        constraints = [
            # Physical ranges: SEM 0.05–30 kV, TEM up to 300 kV (DOMAIN.md).
            models.CheckConstraint(
                condition=Q(accelerating_voltage_kv__isnull=True)
                | (Q(accelerating_voltage_kv__gt=0) & Q(accelerating_voltage_kv__lte=300)),
                name="conditions_voltage_range",
            ),
            models.CheckConstraint(
                condition=Q(working_distance_mm__isnull=True)
                | (Q(working_distance_mm__gte=0) & Q(working_distance_mm__lte=100)),
                name="conditions_wd_range",
            ),
            models.CheckConstraint(
                condition=Q(probe_current_na__isnull=True) | Q(probe_current_na__gt=0),
                name="conditions_current_positive",
            ),
            models.CheckConstraint(
                condition=Q(dwell_time_us__isnull=True) | Q(dwell_time_us__gt=0),
                name="conditions_dwell_positive",
            ),
            models.CheckConstraint(
                condition=Q(magnification__isnull=True) | Q(magnification__gt=0),
                name="conditions_magnification_positive",
            ),
            models.CheckConstraint(
                condition=Q(chamber_pressure_pa__isnull=True) | Q(chamber_pressure_pa__gte=0),
                name="conditions_pressure_nonnegative",
            ),
            models.CheckConstraint(
                condition=Q(tilt_deg__isnull=True) | (Q(tilt_deg__gte=-90) & Q(tilt_deg__lte=90)),
                name="conditions_tilt_range",
            ),
        ]

    def __str__(self) -> str:
        kv = f"{self.accelerating_voltage_kv:g} kV" if self.accelerating_voltage_kv else "? kV"
        return f"{self.label or 'conditions'} ({kv})"


class AnalysisState(models.TextChoices):
    PENDING = "pending", "Waiting for analysis"
    DONE = "done", "Analysed"
    FAILED = "failed", "Analysis failed"


class Micrograph(models.Model):
    session = models.ForeignKey(
        InstrumentSession, on_delete=models.CASCADE, related_name="micrographs"
    )
    conditions = models.ForeignKey(
        Conditions, null=True, blank=True, on_delete=models.SET_NULL, related_name="micrographs"
    )
    file = models.FileField(max_length=200, blank=True)
    sha256 = models.CharField(max_length=64)
    original_name = models.CharField(max_length=255, blank=True)
    content_type = models.CharField(max_length=40, blank=True)
    size_bytes = models.PositiveBigIntegerField(default=0)
    width = models.PositiveIntegerField(null=True, blank=True)
    height = models.PositiveIntegerField(null=True, blank=True)
    pages = models.PositiveIntegerField(default=1)
    bit_depth = models.PositiveSmallIntegerField(null=True, blank=True)
    pixel_size_nm = models.FloatField(null=True, blank=True)
    pixel_size_source = models.CharField(max_length=20, blank=True)
    metadata = models.JSONField(default=dict, blank=True)
    thumbnail = models.FileField(max_length=200, blank=True)
    state = models.CharField(
        max_length=10, choices=AnalysisState.choices, default=AnalysisState.PENDING
    )
    failure_reason = models.TextField(blank=True)
    # How often analysis was started; a file that keeps killing workers ends as failed, not pending.
    analysis_attempts = models.PositiveSmallIntegerField(default=0)
    uploaded_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    uploaded_at = models.DateTimeField(auto_now_add=True)
    analysed_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["session", "uploaded_at", "id"]
        indexes = [models.Index(fields=["state", "uploaded_at"])]
        constraints = [
            models.UniqueConstraint(
                fields=["session", "sha256"], name="micrograph_unique_per_session"
            ),
            models.CheckConstraint(
                condition=Q(pixel_size_nm__isnull=True) | Q(pixel_size_nm__gt=0),
                name="micrograph_pixel_size_positive",
            ),
            models.CheckConstraint(
                condition=~Q(state="failed") | ~Q(failure_reason=""),
                name="micrograph_failure_has_reason",
            ),
        ]

    def __str__(self) -> str:
        return self.original_name or self.sha256[:12]


class Assessment(models.Model):
    """What the analysis measured on one micrograph, for one analysis version."""

    micrograph = models.ForeignKey(Micrograph, on_delete=models.CASCADE, related_name="assessments")
    analysis_version = models.CharField(max_length=20)
    sigma_px = models.FloatField(null=True, blank=True)
    resolution_px = models.FloatField(null=True, blank=True)
    resolution_nm = models.FloatField(null=True, blank=True)
    astigmatism_ratio = models.FloatField(null=True, blank=True)
    astigmatism_angle_deg = models.FloatField(null=True, blank=True)
    charging_score = models.FloatField(null=True, blank=True)
    saturated_fraction = models.FloatField(null=True, blank=True)
    pixel_limited = models.BooleanField(default=False)
    evidence = models.JSONField(default=dict, blank=True)
    flags = models.JSONField(default=list, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["micrograph", "-created_at"]
        constraints = [
            models.UniqueConstraint(
                fields=["micrograph", "analysis_version"], name="assessment_unique_version"
            ),
            models.CheckConstraint(
                condition=Q(charging_score__isnull=True)
                | (Q(charging_score__gte=0) & Q(charging_score__lte=1)),
                name="assessment_charging_score_unit",
            ),
            models.CheckConstraint(
                condition=Q(astigmatism_ratio__isnull=True) | Q(astigmatism_ratio__gte=1),
                name="assessment_astigmatism_ratio_at_least_one",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.micrograph} @ {self.analysis_version}"


class FlagCode(models.TextChoices):
    CHARGING_RISK = "charging_risk", "Charging risk"
    CHARGING = "charging", "Charging"
    LOW_RESOLUTION = "low_resolution", "Low resolution"
    ASTIGMATISM = "astigmatism", "Astigmatism"
    SATURATED = "saturated", "Saturated"
    PIXEL_LIMITED = "pixel_limited", "Pixel-limited"
    METADATA_MISMATCH = "metadata_mismatch", "Logged and embedded settings disagree"
    COATING_HIDES_FEATURES = "coating_hides_features", "Coating may hide features"


class Severity(models.TextChoices):
    INFO = "info", "Note"
    WARNING = "warning", "Warning"
    PROBLEM = "problem", "Problem"


class Flag(models.Model):
    """A finding on a session (or one of its micrographs), with its evidence and what to change."""

    session = models.ForeignKey(InstrumentSession, on_delete=models.CASCADE, related_name="flags")
    micrograph = models.ForeignKey(
        Micrograph, null=True, blank=True, on_delete=models.CASCADE, related_name="flags"
    )
    code = models.CharField(max_length=30, choices=FlagCode.choices)
    severity = models.CharField(max_length=10, choices=Severity.choices, default=Severity.WARNING)
    message = models.CharField(max_length=300)
    evidence = models.JSONField(default=dict, blank=True)
    remedies = models.JSONField(default=list, blank=True)
    computed_at = models.DateTimeField(auto_now=True)
    dismissed_at = models.DateTimeField(null=True, blank=True)
    dismissed_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    dismiss_reason = models.CharField(max_length=300, blank=True)

    history = HistoricalRecords()

    class Meta:
        ordering = ["session", "code"]
        constraints = [
            models.UniqueConstraint(
                fields=["session", "code"],
                condition=Q(micrograph__isnull=True),
                name="flag_unique_session_code",
            ),
            models.UniqueConstraint(
                fields=["micrograph", "code"],
                condition=Q(micrograph__isnull=False),
                name="flag_unique_micrograph_code",
            ),
            models.CheckConstraint(
                condition=(Q(dismissed_at__isnull=True) & Q(dismiss_reason=""))
                | (Q(dismissed_at__isnull=False) & ~Q(dismiss_reason="")),
                name="flag_dismissal_has_reason",
            ),
        ]

    def __str__(self) -> str:
        return f"{self.get_code_display()} on {self.session}"

    @property
    def is_dismissed(self) -> bool:
        return self.dismissed_at is not None
