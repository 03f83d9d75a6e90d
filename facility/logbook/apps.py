from __future__ import annotations

from django.apps import AppConfig


class LogbookConfig(AppConfig):
    name = "facility.logbook"
    label = "logbook"
    default_auto_field = "django.db.models.BigAutoField"
