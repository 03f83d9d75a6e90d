"""Admin for instruments, their pumps and training records.

Thin on purpose: columns, filters and search only. Business rules live in the services.
"""

from __future__ import annotations

from django.contrib import admin

from facility.instruments.models import Instrument, Pump, TrainingRecord


class PumpInline(admin.TabularInline):
    model = Pump
    extra = 0
    fields = ["name", "kind", "runs_continuously", "installed_on"]


@admin.register(Instrument)
class InstrumentAdmin(admin.ModelAdmin):
    list_display = [
        "code",
        "name",
        "kind",
        "emitter_type",
        "location",
        "bookable_from",
        "bookable_until",
        "max_booking_minutes",
        "cancellation_deadline_hours",
        "out_of_service",
        "is_active",
    ]
    list_filter = ["kind", "emitter_type", "out_of_service", "is_active", "allows_out_of_hours"]
    search_fields = ["code", "name", "location"]
    prepopulated_fields = {"code": ["name"]}
    inlines = [PumpInline]
    fieldsets = [
        (None, {"fields": ["code", "name", "kind", "emitter_type", "location"]}),
        (
            "Optics and images",
            {
                "fields": [
                    "vacuum_modes",
                    "expected_resolution_nm",
                    "magnification_reference_width_mm",
                    "metadata_mapping",
                ]
            },
        ),
        (
            "Booking",
            {
                "fields": [
                    "bookable_from",
                    "bookable_until",
                    "bookable_weekdays",
                    "allows_out_of_hours",
                    "max_booking_minutes",
                    "cancellation_deadline_hours",
                ]
            },
        ),
        ("State", {"fields": ["out_of_service", "is_active"]}),
    ]


@admin.register(Pump)
class PumpAdmin(admin.ModelAdmin):
    list_display = ["name", "instrument", "kind", "runs_continuously", "installed_on"]
    list_select_related = ["instrument"]
    list_filter = ["kind", "runs_continuously", "instrument"]
    search_fields = ["name", "instrument__code", "instrument__name"]
    autocomplete_fields = ["instrument"]
    date_hierarchy = "installed_on"


@admin.register(TrainingRecord)
class TrainingRecordAdmin(admin.ModelAdmin):
    list_display = ["user", "instrument", "level", "granted_on", "expires_on", "granted_by"]
    list_select_related = ["user", "instrument", "granted_by"]
    list_filter = ["level", "instrument", ("expires_on", admin.EmptyFieldListFilter)]
    search_fields = [
        "user__username",
        "user__first_name",
        "user__last_name",
        "instrument__code",
        "instrument__name",
    ]
    autocomplete_fields = ["user", "instrument", "granted_by"]
    date_hierarchy = "granted_on"
