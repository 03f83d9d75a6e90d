from __future__ import annotations

from django.apps import AppConfig


class PeopleConfig(AppConfig):
    name = "facility.people"
    label = "people"
    default_auto_field = "django.db.models.BigAutoField"
