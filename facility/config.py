"""One typed reader for settings from the environment.

django-environ does the parsing; this wrapper makes every bad value fail at start with a message that
names the variable, instead of being read silently as False or a default.
"""

from __future__ import annotations

from typing import Any

import environ
from django.core.exceptions import ImproperlyConfigured

_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off", ""}
_ENGINES = {"django.db.backends.postgresql", "django.db.backends.sqlite3"}


class Config:
    def __init__(self) -> None:
        self._env = environ.Env()

    def _raw(self, name: str) -> str | None:
        import os

        return os.environ.get(name)

    def _fail(self, name: str, value: str, expected: str) -> ImproperlyConfigured:
        return ImproperlyConfigured(f"Setting {name}={value!r} is not valid: expected {expected}.")

    def str(self, name: str, default: str | None = None) -> str:
        value = self._raw(name)
        if value is None:
            if default is None:
                raise ImproperlyConfigured(f"Setting {name} is required and not set.")
            return default
        return value

    def bool(self, name: str, default: bool) -> bool:
        value = self._raw(name)
        if value is None:
            return default
        low = value.strip().lower()
        if low in _TRUE:
            return True
        if low in _FALSE:
            return False
        raise self._fail(name, value, "one of 1/0, true/false, yes/no, on/off")

    def int(self, name: str, default: int, *, minimum: int | None = None) -> int:
        value = self._raw(name)
        if value is None:
            return default
        try:
            number = int(value)
        except ValueError:
            raise self._fail(name, value, "a whole number") from None
        if minimum is not None and number < minimum:
            raise self._fail(name, value, f"a whole number of at least {minimum}")
        return number

    def float(self, name: str, default: float, *, minimum: float | None = None) -> float:
        value = self._raw(name)
        if value is None:
            return default
        try:
            number = float(value)
        except ValueError:
            raise self._fail(name, value, "a number") from None
        if number != number or (minimum is not None and number < minimum):  # NaN or too small
            raise self._fail(name, value, f"a number of at least {minimum}")
        return number

    def list(self, name: str, default: list[str]) -> list[str]:
        value = self._raw(name)
        if value is None:
            return default
        return [item.strip() for item in value.split(",") if item.strip()]

    def db(self, name: str, default: str) -> dict[str, Any]:
        value = self._raw(name) or default
        try:
            config = environ.Env.db_url_config(value)
        except Exception as exc:  # environ raises several kinds for a malformed URL
            raise self._fail(name, value, f"a database URL ({exc})") from None
        if config.get("ENGINE") not in _ENGINES:
            raise self._fail(name, value, "a postgres:// or sqlite:/// URL")
        return config

    def cache(self, name: str, default: str) -> dict[str, Any]:
        value = self._raw(name) or default
        try:
            config = environ.Env.cache_url_config(value)
        except Exception as exc:
            raise self._fail(name, value, f"a cache URL ({exc})") from None
        if not config.get("BACKEND"):
            raise self._fail(name, value, "a redis://, locmemcache:// or dummycache:// URL")
        return config

    def email(self, name: str, default: str) -> dict[str, Any]:
        value = self._raw(name) or default
        try:
            config = environ.Env.email_url_config(value)
        except Exception as exc:
            raise self._fail(name, value, f"an e-mail URL ({exc})") from None
        if not config.get("EMAIL_BACKEND"):
            raise self._fail(name, value, "an smtp://, consolemail:// or memorymail:// URL")
        return config

    def timezone(self, name: str, default: str) -> str:
        import zoneinfo

        value = self.str(name, default)
        try:
            zoneinfo.ZoneInfo(value)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            raise self._fail(name, value, "an IANA time zone such as Europe/Vienna") from None
        return value
