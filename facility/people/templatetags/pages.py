"""Template helpers shared by every page: the unread-notification count and plain formatting."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

from django import template
from django.contrib.auth import get_user_model
from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Count, Exists, OuterRef, Q

from facility.people.models import Group, Notification, Profile, Role

register = template.Library()


@register.simple_tag(takes_context=True)
def unread_count(context: template.Context) -> int:
    """Unread notifications of the signed-in person, counted once per request."""
    request = context.get("request")
    user: AbstractBaseUser | None = getattr(request, "user", None)
    if user is None or not user.is_authenticated:
        return 0
    cached = getattr(request, "_unread_count", None)
    if cached is None:
        cached = Notification.objects.filter(user=user, read_at__isnull=True).count()
        request._unread_count = cached
    return cached


@register.simple_tag(takes_context=True)
def nav_facts(context: template.Context) -> dict[str, object]:
    """What the navigation needs to know about the signed-in person, in one query per request:
    unread notifications, and whether they read statements (finance, or a group's leader).
    Staff need no query for the second: they read every statement."""
    request = context.get("request")
    user: AbstractBaseUser | None = getattr(request, "user", None)
    if user is None or not user.is_authenticated:
        return {"unread": 0, "statements": False}
    cached = getattr(request, "_nav_facts", None)
    if cached is None:
        row = (
            get_user_model()
            .objects.filter(pk=user.pk)
            .annotate(
                unread=Count("notifications", filter=Q(notifications__read_at__isnull=True)),
                leads=Exists(Group.objects.filter(leader=OuterRef("pk"))),
                finance=Exists(Profile.objects.filter(user=OuterRef("pk"), role=Role.FINANCE)),
            )
            .values("unread", "leads", "finance")
            .first()
        ) or {"unread": 0, "leads": False, "finance": False}
        cached = {
            "unread": row["unread"],
            "statements": bool(user.is_staff or row["leads"] or row["finance"]),
        }
        request._nav_facts = cached
        request._unread_count = cached["unread"]
    return cached


@register.filter
def hours(value: dt.timedelta | float | Decimal | None) -> str:
    """'2 h 05 min' from a timedelta or a number of hours; an en dash for nothing."""
    if value is None or value == "":
        return "–"
    if isinstance(value, dt.timedelta):
        minutes = round(value.total_seconds() / 60)
    else:
        minutes = round(float(value) * 60)
    if minutes < 60:
        return f"{minutes} min"
    return f"{minutes // 60} h {minutes % 60:02d} min"


@register.filter
def person(user: AbstractBaseUser | None) -> str:
    """A person's full name, or their username when they gave none."""
    if user is None:
        return "–"
    full = user.get_full_name() if hasattr(user, "get_full_name") else ""
    return full or user.get_username()


@register.filter
def label(value: str) -> str:
    """'working_distance_mm' → 'working distance mm' for evidence keys."""
    return str(value).replace("_", " ")


@register.filter
def get_item(mapping: dict, key: object) -> object:
    return mapping.get(key) if hasattr(mapping, "get") else None


_WEEKDAYS = ["Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"]


@register.filter
def weekdays(iso_days: list[int]) -> str:
    """[1, 2, 3, 4, 5] → 'Mon–Fri'; other sets as a list of day names."""
    days = sorted(set(iso_days))
    if days and days == list(range(days[0], days[-1] + 1)) and len(days) > 2:
        return f"{_WEEKDAYS[days[0] - 1]}–{_WEEKDAYS[days[-1] - 1]}"
    return ", ".join(_WEEKDAYS[d - 1] for d in days)
