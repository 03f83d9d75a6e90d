from __future__ import annotations

from django.apps import AppConfig


class ApiConfig(AppConfig):
    name = "api"
    default_auto_field = "django.db.models.BigAutoField"

    def ready(self) -> None:
        # Registers the OpenAPI extension of the token authentication.
        from api import schema  # noqa: F401
