"""Admin for the logbook: sessions, specimens, coatings, conditions, micrographs, assessments, flags.

Thin on purpose: columns, filters and search only. Logbook rules live in logbook/services.py.
Sessions, conditions and micrographs grow fastest, so links to them are raw ids rather than
drop-downs that would load every row.
"""

from __future__ import annotations

from django.contrib import admin
from simple_history.admin import SimpleHistoryAdmin

from facility.logbook.models import (
    Assessment,
    Coating,
    Conditions,
    Flag,
    InstrumentSession,
    Micrograph,
    Specimen,
)


class ConditionsInline(admin.TabularInline):
    model = Conditions
    extra = 0
    fields = [
        "label",
        "accelerating_voltage_kv",
        "working_distance_mm",
        "probe_current_na",
        "detector",
        "dwell_time_us",
        "magnification",
        "vacuum_mode",
        "chamber_pressure_pa",
        "source",
    ]
    show_change_link = True


@admin.register(InstrumentSession)
class InstrumentSessionAdmin(SimpleHistoryAdmin):
    list_display = [
        "started_at",
        "ended_at",
        "instrument",
        "operator",
        "account",
        "purpose",
        "vacuum_mode",
        "beam_on_hours",
        "vent_cycles",
        "specimen",
    ]
    list_select_related = ["instrument", "operator", "account", "specimen"]
    list_filter = ["instrument", "purpose", "vacuum_mode", ("ended_at", admin.EmptyFieldListFilter)]
    search_fields = [
        "operator__username",
        "operator__last_name",
        "account__code",
        "instrument__code",
        "specimen__name",
        "specimen__material",
        "notes",
        "fault_report",
    ]
    autocomplete_fields = ["instrument", "operator", "account"]
    raw_id_fields = ["booking", "specimen", "coating"]
    date_hierarchy = "started_at"
    inlines = [ConditionsInline]
    history_list_display = ["ended_at", "beam_on_hours", "vent_cycles"]


@admin.register(Specimen)
class SpecimenAdmin(admin.ModelAdmin):
    list_display = [
        "name",
        "material",
        "material_class",
        "conductivity",
        "form",
        "feature_size_nm",
        "group",
        "owner",
        "created_at",
    ]
    list_select_related = ["group", "owner"]
    list_filter = ["material_class", "conductivity", "form", "beam_sensitive", "group"]
    search_fields = ["name", "material", "preparation", "notes", "owner__username", "group__name"]
    autocomplete_fields = ["owner", "group"]
    date_hierarchy = "created_at"
    readonly_fields = ["created_at"]


@admin.register(Coating)
class CoatingAdmin(admin.ModelAdmin):
    list_display = ["specimen", "material", "thickness_nm", "method", "applied_at"]
    list_select_related = ["specimen"]
    list_filter = ["material", "method"]
    search_fields = ["specimen__name", "specimen__material"]
    raw_id_fields = ["specimen"]
    date_hierarchy = "applied_at"


@admin.register(Conditions)
class ConditionsAdmin(SimpleHistoryAdmin):
    list_display = [
        "session",
        "label",
        "accelerating_voltage_kv",
        "working_distance_mm",
        "probe_current_na",
        "detector",
        "dwell_time_us",
        "magnification",
        "vacuum_mode",
        "source",
    ]
    list_select_related = ["session", "session__instrument", "session__operator"]
    list_filter = ["source", "vacuum_mode", "detector", "session__instrument"]
    search_fields = [
        "label",
        "detector",
        "session__operator__username",
        "session__instrument__code",
    ]
    raw_id_fields = ["session"]
    date_hierarchy = "created_at"
    readonly_fields = ["created_at"]


class AssessmentInline(admin.TabularInline):
    model = Assessment
    extra = 0
    fields = [
        "analysis_version",
        "resolution_nm",
        "astigmatism_ratio",
        "charging_score",
        "saturated_fraction",
        "pixel_limited",
    ]
    show_change_link = True


@admin.register(Micrograph)
class MicrographAdmin(admin.ModelAdmin):
    list_display = [
        "__str__",
        "session",
        "state",
        "width",
        "height",
        "bit_depth",
        "pixel_size_nm",
        "pixel_size_source",
        "uploaded_at",
    ]
    list_select_related = ["session", "session__instrument", "session__operator"]
    list_filter = ["state", "pixel_size_source", "bit_depth", "session__instrument"]
    search_fields = ["original_name", "sha256", "session__operator__username"]
    raw_id_fields = ["session", "conditions", "uploaded_by"]
    date_hierarchy = "uploaded_at"
    readonly_fields = ["sha256", "size_bytes", "uploaded_at", "analysed_at"]
    inlines = [AssessmentInline]


@admin.register(Assessment)
class AssessmentAdmin(admin.ModelAdmin):
    list_display = [
        "micrograph",
        "analysis_version",
        "resolution_nm",
        "astigmatism_ratio",
        "charging_score",
        "saturated_fraction",
        "pixel_limited",
        "created_at",
    ]
    list_select_related = ["micrograph"]
    list_filter = ["analysis_version", "pixel_limited"]
    search_fields = ["micrograph__original_name", "micrograph__sha256"]
    raw_id_fields = ["micrograph"]
    date_hierarchy = "created_at"
    readonly_fields = ["created_at"]


@admin.register(Flag)
class FlagAdmin(SimpleHistoryAdmin):
    list_display = ["code", "severity", "session", "micrograph", "message", "dismissed_at"]
    list_select_related = [
        "session",
        "session__instrument",
        "session__operator",
        "micrograph",
    ]
    list_filter = ["code", "severity", ("dismissed_at", admin.EmptyFieldListFilter)]
    search_fields = ["message", "session__operator__username", "session__instrument__code"]
    raw_id_fields = ["session", "micrograph", "dismissed_by"]
    date_hierarchy = "computed_at"
    readonly_fields = ["computed_at"]
