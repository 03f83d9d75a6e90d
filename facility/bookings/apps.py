from __future__ import annotations

from django.apps import AppConfig


class BookingsConfig(AppConfig):
    name = "facility.bookings"
    label = "bookings"
    default_auto_field = "django.db.models.BigAutoField"
