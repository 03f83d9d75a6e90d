"""Forms of the upkeep pages. They parse; the upkeep services and rules check every value."""

from __future__ import annotations

import datetime as dt

from django import forms
from django.utils import timezone

from facility.bookings.forms import LOCAL_INPUT, LocalDateTimeInput
from facility.instruments.models import Instrument, Pump
from facility.upkeep.models import METERED_COUNTERS, Counter, ServiceKind

INPUTS = [LOCAL_INPUT, "%Y-%m-%d %H:%M"]
AUDIT_DAYS = 90  # the default audit period: about a quarter


class DateInput(forms.DateInput):
    input_type = "date"

    def __init__(self, attrs: dict | None = None) -> None:
        super().__init__(attrs=attrs, format="%Y-%m-%d")


def _when(label: str) -> forms.DateTimeField:
    return forms.DateTimeField(label=label, widget=LocalDateTimeInput(), input_formats=INPUTS)


def _pump_field(instrument: Instrument, help_text: str) -> forms.ModelChoiceField:
    field = forms.ModelChoiceField(
        label="Pump",
        required=False,
        queryset=Pump.objects.filter(instrument=instrument),
        empty_label="not about a pump",
        help_text=help_text,
    )
    field.label_from_instance = lambda p: f"{p.name} ({p.get_kind_display()})"
    return field


def _part_field(help_text: str) -> forms.CharField:
    return forms.CharField(label="Wear part", required=False, max_length=60, help_text=help_text)


class ServiceEventForm(forms.Form):
    kind = forms.ChoiceField(label="What was done", choices=ServiceKind.choices)
    performed_at = _when("When")
    performed_by = forms.CharField(
        label="Done by",
        required=False,
        max_length=120,
        help_text="A staff member or the service engineer.",
    )
    cost = forms.DecimalField(label="Cost", required=False, min_value=0, decimal_places=2)
    notes = forms.CharField(label="Notes", required=False, widget=forms.Textarea(attrs={"rows": 2}))

    def __init__(self, *args, instrument: Instrument, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.fields["pump"] = _pump_field(instrument, "Only for a pump service or replacement.")
        self.fields["part"] = _part_field("Only for a wear part replaced, e.g. chamber-door-seal.")
        self.order_fields(["kind", "pump", "part", "performed_at", "performed_by", "cost"])


class MeterReadingForm(forms.Form):
    counter = forms.ChoiceField(
        label="Meter",
        choices=[(c.value, c.label) for c in METERED_COUNTERS],
    )
    value = forms.DecimalField(
        label="The meter shows (hours)", min_value=0, decimal_places=2, max_digits=10
    )
    read_at = _when("Read at")
    note = forms.CharField(label="Note", required=False, max_length=300)

    def __init__(self, *args, instrument: Instrument, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.fields["pump"] = _pump_field(instrument, "Only for a pump's hour meter.")
        self.order_fields(["counter", "pump", "value", "read_at", "note"])


class LimitForm(forms.Form):
    counter = forms.ChoiceField(label="Counter", choices=Counter.choices)
    rated = forms.DecimalField(
        label="Rated life (hours, or vent cycles)", min_value=0, decimal_places=1, max_digits=10
    )
    warn_percent = forms.IntegerField(
        label="Warn at (% of the rating)", initial=80, min_value=1, max_value=100
    )
    note = forms.CharField(label="Where the rating comes from", required=False, max_length=300)

    def __init__(self, *args, instrument: Instrument, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.fields["pump"] = _pump_field(instrument, "Only for pump hours.")
        self.fields["part"] = _part_field("Only for vent cycles, e.g. chamber-door-seal.")
        self.order_fields(["counter", "pump", "part", "rated", "warn_percent", "note"])


class AuditForm(forms.Form):
    first_day = forms.DateField(label="From", widget=DateInput())
    last_day = forms.DateField(label="To (included)", widget=DateInput())
    format = forms.ChoiceField(
        label="File", choices=[("csv", "CSV (spreadsheet)"), ("pdf", "PDF (with charts)")]
    )

    @staticmethod
    def default_initial(today: dt.date | None = None) -> dict:
        today = today or timezone.localdate()
        return {
            "first_day": today - dt.timedelta(days=AUDIT_DAYS),
            "last_day": today,
            "format": "csv",
        }
