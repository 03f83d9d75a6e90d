from __future__ import annotations

from django.apps import AppConfig


class FinderConfig(AppConfig):
    name = "facility.finder"
    label = "finder"
    default_auto_field = "django.db.models.BigAutoField"
