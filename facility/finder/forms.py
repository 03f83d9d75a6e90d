"""Forms of the finder pages. They parse; `make_criteria` decides what a valid search is."""

from __future__ import annotations

from django import forms
from django.contrib.auth.models import AbstractBaseUser
from django.db.models import QuerySet
from django.utils import timezone

from facility.errors import Invalid
from facility.finder.criteria import Criteria, make_criteria
from facility.instruments.models import InstrumentKind, VacuumMode
from facility.logbook.models import (
    CoatingMaterial,
    Conductivity,
    InstrumentSession,
    MaterialClass,
    SpecimenForm,
)

ANY = ("", "any")


def _choice(label: str, choices: list[tuple[str, str]], help_text: str = "") -> forms.ChoiceField:
    return forms.ChoiceField(
        label=label, required=False, choices=[ANY, *choices], help_text=help_text
    )


class SearchForm(forms.Form):
    """What the researcher describes; every field may stay empty but not all of them."""

    text = forms.CharField(
        label="Material, preparation or notes",
        required=False,
        max_length=300,
        help_text="For example: porous polycarbonate membrane, freeze-dried.",
    )
    material_class = _choice("Class of material", MaterialClass.choices)
    conductivity = _choice("Conductivity", Conductivity.choices)
    form = _choice("Form", SpecimenForm.choices)
    feature_size_nm = forms.FloatField(
        label="Feature size of interest (nm)",
        required=False,
        widget=forms.NumberInput(attrs={"step": "any", "inputmode": "decimal"}),
    )
    beam_sensitive = _choice("Damaged by the beam", [("yes", "yes"), ("no", "no")])
    coating = _choice(
        "Coating", CoatingMaterial.choices, help_text="“None” finds uncoated specimens."
    )
    vacuum_mode = _choice("Vacuum mode", VacuumMode.choices)
    instrument_kind = _choice("Kind of instrument", InstrumentKind.choices)

    # Filled by clean(): the finder's own criteria, so the view never rebuilds them.
    criteria: Criteria | None = None

    def clean(self) -> dict:
        data = super().clean()
        if self.errors:
            return data
        try:
            self.criteria = make_criteria(**data)
        except Invalid as error:
            self.criteria = None
            for name, notes in error.fields.items():
                if name in self.fields:
                    self.add_error(name, notes)
            self.add_error(None, error.message)
        return data


def open_sessions_of(user: AbstractBaseUser) -> QuerySet[InstrumentSession]:
    """The sessions a person is checked in to now: where suggested conditions can go."""
    return (
        InstrumentSession.objects.filter(operator=user, ended_at__isnull=True)
        .select_related("instrument")
        .order_by("-started_at")
    )


class StartForm(forms.Form):
    """ "Start from these settings": which open session receives the suggestion."""

    session = forms.ModelChoiceField(
        label="Your open session", queryset=InstrumentSession.objects.none()
    )

    def __init__(self, *args, user: AbstractBaseUser, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        field = self.fields["session"]
        field.queryset = open_sessions_of(user)
        field.empty_label = None
        field.label_from_instance = lambda s: (
            f"{s.instrument.name}, checked in {timezone.localtime(s.started_at):%d %b %H:%M}"
        )
