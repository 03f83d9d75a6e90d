from __future__ import annotations

from django.apps import AppConfig


class UpkeepConfig(AppConfig):
    name = "facility.upkeep"
    label = "upkeep"
    default_auto_field = "django.db.models.BigAutoField"
