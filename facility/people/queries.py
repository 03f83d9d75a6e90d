"""Reads about people: staff status, memberships, and the groups a person belongs to."""

from __future__ import annotations

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import QuerySet

from facility.people.models import Account, Group


def is_staff(user: AbstractBaseUser | None) -> bool:
    """Facility staff: an active Django staff user (the manager role)."""
    return bool(user and user.is_authenticated and user.is_active and user.is_staff)


def group_ids_of(user: AbstractBaseUser) -> list[int]:
    if not user.is_authenticated:
        return []
    return list(user.memberships.values_list("group_id", flat=True))


def groups_of(user: AbstractBaseUser) -> QuerySet[Group]:
    return Group.objects.filter(memberships__user=user)


def led_group_ids(user: AbstractBaseUser) -> list[int]:
    if not user.is_authenticated:
        return []
    return list(Group.objects.filter(leader=user).values_list("id", flat=True))


def accounts_usable_by(user: AbstractBaseUser) -> QuerySet[Account]:
    """Accounts of the person's groups (validity dates are checked by the booking rules)."""
    return Account.objects.filter(group__memberships__user=user, is_active=True).distinct()


def visible_to(user: AbstractBaseUser) -> QuerySet[Group]:
    """Groups a person may see: staff all, others their own."""
    if is_staff(user):
        return Group.objects.all()
    return groups_of(user)
