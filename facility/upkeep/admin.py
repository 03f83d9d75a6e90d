"""Admin for upkeep: service events, meter readings and limits with their change history; alerts.

Thin: the forms check the same rules as the services (rules.py), so a pump of another instrument or
a reset inside a logged session is refused here too. Who changed what is recorded by
simple-history's request middleware and shown under "History" on each object's page.
"""

from __future__ import annotations

from typing import Any

from django import forms
from django.contrib import admin, messages
from django.core.exceptions import ValidationError
from django.db.models import QuerySet
from django.http import HttpRequest
from django.utils import timezone
from simple_history.admin import SimpleHistoryAdmin

from facility.errors import DomainError
from facility.upkeep import rules, services
from facility.upkeep.models import Alert, Limit, MeterReading, ServiceEvent


def _report(form: forms.ModelForm, exc: DomainError) -> None:
    """Show a rule's refusal beside the fields it names, else at the top of the form."""
    placed = False
    for field, problems in exc.fields.items():
        if field in form.fields:
            form.add_error(field, f"{exc.message} ({'; '.join(problems)})")
            placed = True
    if not placed:
        raise ValidationError(exc.message)


class ServiceEventForm(forms.ModelForm):
    class Meta:
        model = ServiceEvent
        fields = [
            "instrument",
            "kind",
            "pump",
            "part",
            "performed_at",
            "performed_by",
            "notes",
            "cost",
        ]

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if self.errors or not all(data.get(k) for k in ("instrument", "kind", "performed_at")):
            return data
        try:
            part, cost = rules.check_service_event(
                instrument=data["instrument"],
                kind=data["kind"],
                pump=data.get("pump"),
                part=data.get("part") or "",
                performed_at=data["performed_at"],
                cost=data.get("cost"),
                now=timezone.now(),
            )
        except DomainError as exc:
            _report(self, exc)
            return data
        data["part"], data["cost"] = part, cost
        return data


@admin.register(ServiceEvent)
class ServiceEventAdmin(SimpleHistoryAdmin):
    form = ServiceEventForm
    list_display = [
        "performed_at",
        "instrument",
        "kind",
        "pump",
        "part",
        "performed_by",
        "cost",
        "recorded_by",
    ]
    list_select_related = ["instrument", "pump", "recorded_by"]
    list_filter = ["kind", "instrument"]
    search_fields = ["instrument__code", "performed_by", "notes", "part"]
    autocomplete_fields = ["instrument"]
    date_hierarchy = "performed_at"
    readonly_fields = ["recorded_by", "created_at"]
    history_list_display = ["kind", "performed_at", "cost"]

    def save_model(self, request: HttpRequest, obj: ServiceEvent, form: Any, change: bool) -> None:
        if not change:
            obj.recorded_by = request.user
        super().save_model(request, obj, form, change)
        services.resolve_alerts_after(obj)


class MeterReadingForm(forms.ModelForm):
    class Meta:
        model = MeterReading
        fields = ["instrument", "counter", "pump", "value", "read_at", "note"]

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if self.errors or not all(data.get(k) for k in ("instrument", "counter", "read_at")):
            return data
        try:
            rules.check_reading(
                instrument=data["instrument"],
                counter=data["counter"],
                pump=data.get("pump"),
                read_at=data["read_at"],
                now=timezone.now(),
            )
        except DomainError as exc:
            _report(self, exc)
        return data


@admin.register(MeterReading)
class MeterReadingAdmin(SimpleHistoryAdmin):
    form = MeterReadingForm
    list_display = ["read_at", "instrument", "counter", "pump", "value", "recorded_by"]
    list_select_related = ["instrument", "pump", "recorded_by"]
    list_filter = ["counter", "instrument"]
    search_fields = ["instrument__code", "note"]
    autocomplete_fields = ["instrument"]
    date_hierarchy = "read_at"
    readonly_fields = ["recorded_by", "created_at"]
    history_list_display = ["value", "read_at"]

    def save_model(self, request: HttpRequest, obj: MeterReading, form: Any, change: bool) -> None:
        if not change:
            obj.recorded_by = request.user
        super().save_model(request, obj, form, change)


class LimitForm(forms.ModelForm):
    class Meta:
        model = Limit
        fields = ["instrument", "counter", "pump", "part", "rated", "warn_percent", "note"]

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if self.errors or not all(data.get(k) for k in ("instrument", "counter")):
            return data
        try:
            data["part"] = rules.check_limit(
                instrument=data["instrument"],
                counter=data["counter"],
                pump=data.get("pump"),
                part=data.get("part") or "",
                warn_percent=data.get("warn_percent") or 0,
            )
        except DomainError as exc:
            _report(self, exc)
        return data


@admin.register(Limit)
class LimitAdmin(SimpleHistoryAdmin):
    form = LimitForm
    list_display = ["instrument", "counter", "pump", "part", "rated", "warn_percent", "set_by"]
    list_select_related = ["instrument", "pump", "set_by"]
    list_filter = ["counter", "instrument"]
    search_fields = ["instrument__code", "part", "note"]
    autocomplete_fields = ["instrument"]
    readonly_fields = ["set_by", "updated_at"]
    history_list_display = ["rated", "warn_percent"]

    def save_model(self, request: HttpRequest, obj: Limit, form: Any, change: bool) -> None:
        obj.set_by = request.user
        super().save_model(request, obj, form, change)


@admin.register(Alert)
class AlertAdmin(admin.ModelAdmin):
    list_display = [
        "raised_at",
        "instrument",
        "level",
        "message",
        "acknowledged_at",
        "resolved_at",
    ]
    list_select_related = ["instrument"]
    list_filter = [
        "level",
        "instrument",
        ("acknowledged_at", admin.EmptyFieldListFilter),
        ("resolved_at", admin.EmptyFieldListFilter),
    ]
    search_fields = ["message", "instrument__code"]
    date_hierarchy = "raised_at"
    actions = ["acknowledge"]
    readonly_fields = [
        "topic",
        "counter_key",
        "instrument",
        "counter",
        "pump",
        "part",
        "level",
        "value",
        "rated",
        "forecast_on",
        "message",
        "raised_at",
        "resolved_at",
        "acknowledged_at",
        "acknowledged_by",
    ]

    def has_add_permission(self, request: HttpRequest) -> bool:
        return False  # alerts are raised by the daily check only

    @admin.action(description="Acknowledge the selected alerts")
    def acknowledge(self, request: HttpRequest, queryset: QuerySet[Alert]) -> None:
        try:
            for alert in queryset:
                services.acknowledge_alert(alert=alert, by=request.user)
        except DomainError as exc:
            self.message_user(request, exc.message, level=messages.ERROR)
