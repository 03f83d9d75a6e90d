"""Query filters (django-filter) of the list endpoints.

Related objects are matched by their public key (instrument code, username, account code), with
plain lookups: a filter never reveals whether a row outside the caller's scope exists, it only
narrows what `visible_to` already allowed.
"""

from __future__ import annotations

from typing import Any

import django_filters as df
from django import forms
from django.db.models import Exists, OuterRef, QuerySet
from drf_spectacular.utils import extend_schema_field
from rest_framework.filters import OrderingFilter

from api.serializers.billing import parse_month
from facility.billing.models import Charge, ChargeKind, Statement, StatementState
from facility.bookings.models import Booking, BookingState, Purpose
from facility.instruments.models import VacuumMode
from facility.logbook.models import (
    AnalysisState,
    CoatingMaterial,
    Conductivity,
    Flag,
    FlagCode,
    InstrumentSession,
    MaterialClass,
    Micrograph,
    Severity,
    Specimen,
    SpecimenForm,
)
from facility.people.models import Account
from facility.upkeep.models import Alert, AlertLevel

# The largest signed 64-bit integer: what SQLite (and a PostgreSQL bigint) can hold.
MAX_ID = 2**63 - 1


@extend_schema_field({"type": "integer", "minimum": 1, "maximum": MAX_ID})
class IdFilter(df.NumberFilter):
    """A row id: a whole number within the database's integer range.

    django-filter's NumberFilter takes any decimal, and an id of 1e30 would reach the database
    and fail there (a 500); out of range, it is a 400 naming the parameter.
    """

    field_class = forms.IntegerField

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("min_value", 1)
        kwargs.setdefault("max_value", MAX_ID)
        super().__init__(*args, **kwargs)


class MonthFilter(df.CharFilter):
    """?month=YYYY-MM (1970–2999); a malformed month is a 400 naming the parameter."""

    def filter(self, qs: QuerySet, value: str) -> QuerySet:
        if value in (None, ""):
            return qs
        return qs.filter(**{self.field_name: parse_month(value, self.field_name)})


class Ordering(OrderingFilter):
    """DRF's ordering, with the allowed values listed in the schema."""

    def get_schema_operation_parameters(self, view) -> list[dict]:
        parameters = super().get_schema_operation_parameters(view)
        fields = list(getattr(view, "ordering_fields", None) or [])
        for parameter in parameters:
            parameter["schema"]["enum"] = [p + f for f in fields for p in ("", "-")]
            parameter["description"] = (
                "Order by one of the listed fields; a leading '-' reverses it."
            )
        return parameters


class BookingFilter(df.FilterSet):
    instrument = df.CharFilter(field_name="instrument__code", help_text="Instrument code.")
    user = df.CharFilter(field_name="user__username", help_text="Username of who booked.")
    account = df.CharFilter(field_name="account__code", help_text="Account code.")
    group = IdFilter(field_name="account__group_id", help_text="Group id of the account.")
    state = df.MultipleChoiceFilter(choices=BookingState.choices)
    purpose = df.ChoiceFilter(choices=Purpose.choices)
    window_start = df.IsoDateTimeFilter(
        field_name="ends_at", lookup_expr="gt", help_text="Bookings that end after this moment."
    )
    window_end = df.IsoDateTimeFilter(
        field_name="starts_at",
        lookup_expr="lt",
        help_text="Bookings that start before this moment; with window_start, those overlapping "
        "[window_start, window_end).",
    )

    class Meta:
        model = Booking
        fields: list[str] = []


class SessionFilter(df.FilterSet):
    instrument = df.CharFilter(field_name="instrument__code", help_text="Instrument code.")
    operator = df.CharFilter(field_name="operator__username", help_text="Operator's username.")
    account = df.CharFilter(field_name="account__code", help_text="Account code.")
    group = IdFilter(field_name="account__group_id", help_text="Group id of the account.")
    purpose = df.ChoiceFilter(choices=Purpose.choices)
    started_after = df.IsoDateTimeFilter(field_name="started_at", lookup_expr="gte")
    started_before = df.IsoDateTimeFilter(field_name="started_at", lookup_expr="lt")
    is_open = df.BooleanFilter(field_name="ended_at", lookup_expr="isnull", help_text="Still open.")
    vacuum_mode = df.ChoiceFilter(choices=VacuumMode.choices)
    material = df.CharFilter(
        field_name="specimen__material", lookup_expr="icontains", help_text="Specimen material."
    )
    material_class = df.ChoiceFilter(
        field_name="specimen__material_class", choices=MaterialClass.choices
    )
    conductivity = df.ChoiceFilter(
        field_name="specimen__conductivity", choices=Conductivity.choices
    )
    form = df.ChoiceFilter(field_name="specimen__form", choices=SpecimenForm.choices)
    feature_size_min_nm = df.NumberFilter(field_name="specimen__feature_size_nm", lookup_expr="gte")
    feature_size_max_nm = df.NumberFilter(field_name="specimen__feature_size_nm", lookup_expr="lte")
    coating = df.ChoiceFilter(field_name="coating__material", choices=CoatingMaterial.choices)
    flag = df.ChoiceFilter(
        choices=FlagCode.choices,
        method="filter_flag",
        help_text="Sessions with a live flag of this code.",
    )

    class Meta:
        model = InstrumentSession
        fields: list[str] = []

    def filter_flag(self, queryset: QuerySet, name: str, value: str) -> QuerySet:
        # EXISTS rather than a join, so a session with several such flags is listed once.
        live = Flag.objects.filter(session=OuterRef("pk"), code=value, dismissed_at__isnull=True)
        return queryset.filter(Exists(live))


class MicrographFilter(df.FilterSet):
    session = IdFilter(field_name="session_id")
    instrument = df.CharFilter(field_name="session__instrument__code", help_text="Instrument code.")
    operator = df.CharFilter(field_name="session__operator__username")
    account = df.CharFilter(field_name="session__account__code")
    group = IdFilter(field_name="session__account__group_id")
    state = df.ChoiceFilter(choices=AnalysisState.choices)
    sha256 = df.CharFilter(help_text="Find an image by the SHA-256 of its bytes.")
    uploaded_after = df.IsoDateTimeFilter(field_name="uploaded_at", lookup_expr="gte")
    uploaded_before = df.IsoDateTimeFilter(field_name="uploaded_at", lookup_expr="lt")

    class Meta:
        model = Micrograph
        fields: list[str] = []


class FlagFilter(df.FilterSet):
    session = IdFilter(field_name="session_id")
    micrograph = IdFilter(field_name="micrograph_id")
    instrument = df.CharFilter(field_name="session__instrument__code")
    account = df.CharFilter(field_name="session__account__code")
    group = IdFilter(field_name="session__account__group_id")
    code = df.MultipleChoiceFilter(choices=FlagCode.choices)
    severity = df.MultipleChoiceFilter(choices=Severity.choices)
    dismissed = df.BooleanFilter(field_name="dismissed_at", lookup_expr="isnull", exclude=True)

    class Meta:
        model = Flag
        fields: list[str] = []


class SpecimenFilter(df.FilterSet):
    material = df.CharFilter(lookup_expr="icontains")
    material_class = df.ChoiceFilter(choices=MaterialClass.choices)
    conductivity = df.ChoiceFilter(choices=Conductivity.choices)
    form = df.ChoiceFilter(choices=SpecimenForm.choices)
    group = IdFilter(field_name="group_id")
    owner = df.CharFilter(field_name="owner__username")

    class Meta:
        model = Specimen
        fields: list[str] = []


class AccountFilter(df.FilterSet):
    group = IdFilter(field_name="group_id")
    is_active = df.BooleanFilter()

    class Meta:
        model = Account
        fields: list[str] = []


class AlertFilter(df.FilterSet):
    instrument = df.CharFilter(field_name="instrument__code", help_text="Instrument code.")
    level = df.MultipleChoiceFilter(choices=AlertLevel.choices)

    class Meta:
        model = Alert
        fields: list[str] = []


class StatementFilter(df.FilterSet):
    account = df.CharFilter(field_name="account__code", help_text="Account code.")
    group = IdFilter(field_name="account__group_id", help_text="Group id of the account.")
    month = MonthFilter(field_name="month", help_text="YYYY-MM.")
    state = df.ChoiceFilter(choices=StatementState.choices)

    class Meta:
        model = Statement
        fields: list[str] = []


class LineFilter(df.FilterSet):
    statement = IdFilter(field_name="statement_id")
    account = df.CharFilter(field_name="statement__account__code", help_text="Account code.")
    instrument = df.CharFilter(field_name="instrument__code", help_text="Instrument code.")
    month = MonthFilter(field_name="statement__month", help_text="YYYY-MM.")
    kind = df.MultipleChoiceFilter(choices=ChargeKind.choices)

    class Meta:
        model = Charge
        fields: list[str] = []
