"""Shared parsing for the billing commands: bad input becomes one CommandError line."""

from __future__ import annotations

import datetime as dt
from typing import Any

from django.contrib.auth import get_user_model
from django.core.management.base import CommandError

from facility.billing.months import parse_month


def month_arg(text: str) -> dt.date:
    try:
        return parse_month(text)
    except ValueError as exc:
        raise CommandError(str(exc)) from None


def staff_user(username: str) -> Any:
    user = get_user_model().objects.filter(username=username).first()
    if user is None:
        raise CommandError(f"no user named {username!r}")
    if not (user.is_active and user.is_staff):
        raise CommandError(f"{username} is not active facility staff")
    return user


class RawStream:
    """Django's OutputWrapper appends a newline to every write; tqdm needs raw writes."""

    def __init__(self, wrapper: Any) -> None:
        self._wrapper = wrapper

    def write(self, text: str) -> None:
        self._wrapper.write(text, ending="")

    def flush(self) -> None:
        self._wrapper.flush()
