"""Forms of the booking pages: they parse input; every rule is the booking service's."""

from __future__ import annotations

from django import forms
from django.contrib.auth.models import AbstractBaseUser

from facility.bookings.models import Purpose
from facility.errors import DomainError
from facility.people.models import Account
from facility.people.queries import accounts_usable_by, is_staff

LOCAL_INPUT = "%Y-%m-%dT%H:%M"


class LocalDateTimeInput(forms.DateTimeInput):
    input_type = "datetime-local"

    def __init__(self, attrs: dict | None = None) -> None:
        super().__init__(attrs=attrs, format=LOCAL_INPUT)


class BookingForm(forms.Form):
    starts_at = forms.DateTimeField(
        label="Start", widget=LocalDateTimeInput(), input_formats=[LOCAL_INPUT, "%Y-%m-%d %H:%M"]
    )
    ends_at = forms.DateTimeField(
        label="End", widget=LocalDateTimeInput(), input_formats=[LOCAL_INPUT, "%Y-%m-%d %H:%M"]
    )
    account = forms.ModelChoiceField(
        label="Account to charge",
        queryset=Account.objects.none(),
        help_text="One of your groups' accounts.",
    )
    purpose = forms.ChoiceField(label="Purpose", choices=Purpose.choices, initial=Purpose.OWN_USE)
    note = forms.CharField(
        label="Note for the staff (optional)",
        required=False,
        max_length=300,
        widget=forms.TextInput(),
    )

    def __init__(self, *args, user: AbstractBaseUser, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        accounts = accounts_usable_by(user)
        self.fields["account"].queryset = accounts
        self.fields["account"].empty_label = None
        if not is_staff(user):
            self.fields["purpose"].choices = [
                (value, text) for value, text in Purpose.choices if value != Purpose.SERVICE
            ]


def show_refusal(form: forms.Form, error: DomainError) -> None:
    """Put a service's refusal on the form: its message on top, its field notes beside fields."""
    form.add_error(None, error.message)
    for name, notes in error.fields.items():
        if name in form.fields and name not in form.errors:
            form.add_error(name, notes)
