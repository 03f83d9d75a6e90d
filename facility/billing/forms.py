"""Forms of the billing pages. They parse; the billing services check every rule and amount."""

from __future__ import annotations

import datetime as dt

from django import forms

from facility.billing.months import parse_month


class MonthInput(forms.TextInput):
    input_type = "month"


class MonthField(forms.CharField):
    """'2027-03' (what <input type="month"> sends) as the first day of that month."""

    widget = MonthInput

    def to_python(self, value: object) -> dt.date | None:
        text = super().to_python(value)
        if not text:
            return None
        try:
            return parse_month(str(text))
        except ValueError as error:
            raise forms.ValidationError(str(error).capitalize() + ".") from None

    def prepare_value(self, value: object) -> object:
        return f"{value:%Y-%m}" if isinstance(value, dt.date) else value


class MonthForm(forms.Form):
    month = MonthField(label="Month")


class FinaliseForm(forms.Form):
    # The checksum of the lines the reviewer saw: finalising refuses if they changed since.
    expected_checksum = forms.CharField(widget=forms.HiddenInput, max_length=64)


class AdjustmentForm(forms.Form):
    amount = forms.CharField(
        label="Amount",
        max_length=20,
        help_text="Negative for a credit, e.g. -25.00.",
        widget=forms.TextInput(attrs={"inputmode": "decimal"}),
    )
    reason = forms.CharField(label="Reason", max_length=250, help_text="Printed on the statement.")
