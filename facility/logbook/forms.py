"""Forms of the logbook pages. They only parse; the logbook services check every rule and range."""

from __future__ import annotations

from django import forms
from django.contrib.auth.models import AbstractBaseUser

from facility.bookings.models import Purpose
from facility.instruments.models import Instrument, VacuumMode
from facility.logbook.models import (
    CoatingMaterial,
    CoatingMethod,
    Conductivity,
    MaterialClass,
    Specimen,
    SpecimenForm,
)
from facility.people.models import Account
from facility.people.queries import accounts_usable_by, group_ids_of


class CheckInForm(forms.Form):
    """Only asked for a walk-up: a booking brings its own account and purpose."""

    account = forms.ModelChoiceField(label="Account to charge", queryset=Account.objects.none())
    purpose = forms.ChoiceField(
        label="Purpose",
        choices=[(v, t) for v, t in Purpose.choices if v != Purpose.SERVICE],
        initial=Purpose.OWN_USE,
    )

    def __init__(self, *args, user: AbstractBaseUser, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.fields["account"].queryset = accounts_usable_by(user)
        self.fields["account"].empty_label = None
        if user.is_staff:
            self.fields["purpose"].choices = Purpose.choices


class CheckOutForm(forms.Form):
    beam_on_hours = forms.DecimalField(
        label="Beam-on time (hours)",
        required=False,
        min_value=0,
        decimal_places=2,
        max_digits=7,
        help_text="Leave empty if the beam was on for the whole session.",
        widget=forms.NumberInput(attrs={"step": "0.25", "inputmode": "decimal"}),
    )
    vent_cycles = forms.IntegerField(
        label="Times the chamber was vented",
        min_value=0,
        max_value=1000,
        initial=0,
        widget=forms.NumberInput(attrs={"inputmode": "numeric"}),
    )


class SpecimenChoiceForm(forms.Form):
    specimen = forms.ModelChoiceField(
        label="A specimen your group logged before", queryset=Specimen.objects.none()
    )

    def __init__(self, *args, operator: AbstractBaseUser, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.fields["specimen"].queryset = Specimen.objects.filter(
            group_id__in=group_ids_of(operator)
        ).order_by("-created_at")


class NewSpecimenForm(forms.Form):
    name = forms.CharField(label="Name or label", max_length=160)
    material = forms.CharField(
        label="Material", max_length=160, help_text="For example porous alumina, PCL fibres."
    )
    material_class = forms.ChoiceField(label="Class of material", choices=MaterialClass.choices)
    conductivity = forms.ChoiceField(label="Conductivity", choices=Conductivity.choices)
    form = forms.ChoiceField(label="Form", choices=SpecimenForm.choices)
    feature_size_nm = forms.FloatField(
        label="Smallest feature of interest (nm)", required=False, min_value=0
    )
    e2_kev = forms.FloatField(
        label="Second crossover energy E2 (keV)",
        required=False,
        min_value=0,
        help_text="Only if known; a typical value for the class is used otherwise.",
    )
    beam_sensitive = forms.BooleanField(label="Damaged by the beam", required=False)
    preparation = forms.CharField(
        label="Preparation", required=False, widget=forms.Textarea(attrs={"rows": 2})
    )
    tags = forms.CharField(
        label="Tags", required=False, help_text="Separated by commas, e.g. eds, cross-section."
    )

    def service_fields(self) -> dict:
        data = dict(self.cleaned_data)
        data["tags"] = [t.strip() for t in data.get("tags", "").split(",") if t.strip()]
        return {k: v for k, v in data.items() if v not in (None, "")}


class CoatingForm(forms.Form):
    material = forms.ChoiceField(label="Coating", choices=CoatingMaterial.choices)
    thickness_nm = forms.FloatField(
        label="Thickness (nm)", required=False, min_value=0, help_text="0 or empty when uncoated."
    )
    method = forms.ChoiceField(
        label="Method", choices=CoatingMethod.choices, initial=CoatingMethod.SPUTTER
    )


class SessionSettingsForm(forms.Form):
    vacuum_mode = forms.ChoiceField(label="Vacuum mode", choices=VacuumMode.choices)
    notes = forms.CharField(label="Notes", required=False, widget=forms.Textarea(attrs={"rows": 3}))

    def __init__(self, *args, instrument: Instrument, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        offered = set(instrument.vacuum_modes or []) or {VacuumMode.HIGH}
        self.fields["vacuum_mode"].choices = [(v, t) for v, t in VacuumMode.choices if v in offered]


class FaultForm(forms.Form):
    fault_report = forms.CharField(
        label="What is wrong with the instrument?",
        widget=forms.Textarea(attrs={"rows": 3}),
        max_length=4000,
        help_text="The facility staff are told at once.",
    )


def _number(label: str) -> forms.FloatField:
    return forms.FloatField(
        label=label, required=False, widget=forms.NumberInput(attrs={"step": "any"})
    )


class ConditionsForm(forms.Form):
    label = forms.CharField(label="Label", required=False, max_length=80)
    accelerating_voltage_kv = _number("Accelerating voltage (kV)")
    working_distance_mm = _number("Working distance (mm)")
    probe_current_na = _number("Probe current (nA)")
    spot_size = _number("Spot size")
    aperture_um = _number("Aperture (µm)")
    detector = forms.CharField(label="Detector", required=False, max_length=60)
    dwell_time_us = _number("Dwell time (µs per pixel)")
    magnification = _number("Magnification (×)")
    vacuum_mode = forms.ChoiceField(
        label="Vacuum mode", required=False, choices=[("", "as the session"), *VacuumMode.choices]
    )
    chamber_pressure_pa = _number("Chamber pressure (Pa)")
    tilt_deg = _number("Stage tilt (°)")

    FIELDS = (
        "label",
        "accelerating_voltage_kv",
        "working_distance_mm",
        "probe_current_na",
        "spot_size",
        "aperture_um",
        "detector",
        "dwell_time_us",
        "magnification",
        "vacuum_mode",
        "chamber_pressure_pa",
        "tilt_deg",
    )

    @classmethod
    def initial_from(cls, conditions) -> dict:
        if conditions is None:
            return {}
        return {
            name: getattr(conditions, name)
            for name in cls.FIELDS
            if name != "label" and getattr(conditions, name) not in (None, "")
        }

    def values(self) -> dict:
        return {k: v for k, v in self.cleaned_data.items() if v not in (None, "")}


class DismissForm(forms.Form):
    reason = forms.CharField(
        label="Why does this not apply?",
        max_length=300,
        help_text="Kept with the flag, with your name.",
    )
