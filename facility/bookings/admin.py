"""Admin for bookings, with their change history.

Thin on purpose: columns, filters and search only. Booking rules (training, hours, overlap) live in
bookings/services.py; on PostgreSQL the database refuses an overlap here too.
"""

from __future__ import annotations

from django.contrib import admin
from simple_history.admin import SimpleHistoryAdmin

from facility.bookings.models import Booking


@admin.register(Booking)
class BookingAdmin(SimpleHistoryAdmin):
    list_display = [
        "starts_at",
        "ends_at",
        "instrument",
        "user",
        "account",
        "purpose",
        "state",
        "cancelled_at",
    ]
    list_select_related = ["instrument", "user", "account"]
    list_filter = ["state", "purpose", "instrument"]
    search_fields = [
        "user__username",
        "user__first_name",
        "user__last_name",
        "account__code",
        "instrument__code",
        "note",
    ]
    autocomplete_fields = ["instrument", "user", "account", "created_by"]
    date_hierarchy = "starts_at"
    readonly_fields = ["created_at"]
    history_list_display = ["state", "starts_at", "ends_at"]
