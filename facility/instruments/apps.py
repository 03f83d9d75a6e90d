from __future__ import annotations

from django.apps import AppConfig


class InstrumentsConfig(AppConfig):
    name = "facility.instruments"
    label = "instruments"
    default_auto_field = "django.db.models.BigAutoField"
