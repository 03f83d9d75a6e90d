"""Reads on billing: who may see which statements and lines, lookups, and the checksum.

Usage reports live in usage.py; exports in exports.py. Everything here is read-only.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Q, QuerySet

from facility.billing.checksum import LINE_FIELDS, statement_digest
from facility.billing.models import Charge, Statement, StatementState, Tariff
from facility.people.models import Role
from facility.people.queries import is_staff, led_group_ids


def sees_all_billing(user: AbstractBaseUser) -> bool:
    """Staff and the finance office see every statement."""
    if is_staff(user):
        return True
    if not user.is_authenticated:
        return False
    profile = getattr(user, "profile", None)
    return bool(profile and profile.role == Role.FINANCE)


def visible_to(user: AbstractBaseUser) -> QuerySet[Statement]:
    """Statements a person may see: staff and finance all; group leaders their groups' accounts."""
    qs = Statement.objects.select_related("account", "account__group", "finalised_by")
    if sees_all_billing(user):
        return qs
    if not user.is_authenticated:
        return qs.none()
    return qs.filter(account__group_id__in=led_group_ids(user))


def lines_visible_to(user: AbstractBaseUser) -> QuerySet[Charge]:
    """Lines a person may see: as for statements, plus everyone's own lines ("my costs")."""
    qs = Charge.objects.select_related("statement", "statement__account", "instrument", "user")
    if sees_all_billing(user):
        return qs
    if not user.is_authenticated:
        return qs.none()
    return qs.filter(Q(user=user) | Q(statement__account__group_id__in=led_group_ids(user)))


def lines_of(statement: Statement) -> QuerySet[Charge]:
    """A statement's lines in printed order."""
    return (
        Charge.objects.filter(statement_id=statement.pk)
        .select_related("instrument", "user", "created_by", "corrects", "tariff")
        .order_by("position", "id")
    )


def statement_for(account_id: int, month: dt.date) -> Statement | None:
    return Statement.objects.filter(account_id=account_id, month=month).first()


def statements_of_month(month: dt.date, *, include_drafts: bool = False) -> QuerySet[Statement]:
    states = [StatementState.FINAL] + ([StatementState.DRAFT] if include_drafts else [])
    return (
        Statement.objects.filter(month=month, state__in=states)
        .select_related("account", "account__group")
        .order_by("number", "account__code")
    )


def sum_of_lines(statement: Statement) -> Decimal:
    """Exact sum of the line amounts.

    Summed here rather than with SQL SUM: SQLite stores NUMERIC values as binary floats, so its
    SUM is float arithmetic; the Decimals Django reads back are exact to the cent.
    """
    amounts = Charge.objects.filter(statement_id=statement.pk).values_list("amount", flat=True)
    return sum(amounts, Decimal("0.00"))


def checksum_of(statement: Statement, *, number: int | None = None) -> str:
    """SHA-256 over the statement's identity and its lines as stored (see checksum.py).

    `number` defaults to the statement's own; a draft's checksum (number None) lets a reviewer
    confirm at finalisation that the lines did not change since they looked.
    """
    lines = (
        Charge.objects.filter(statement_id=statement.pk)
        .order_by("position", "id")
        .values(*LINE_FIELDS)
    )
    header = {
        "account_id": statement.account_id,
        "account_code": statement.account.code,
        "month": statement.month.isoformat(),
        "number": statement.number if number is None else number,
        "currency": statement.currency,
        "total": sum_of_lines(statement),
    }
    return statement_digest(header, lines)


def checksum_matches(statement: Statement) -> bool:
    """True when a final statement's stored checksum still matches its lines."""
    return bool(statement.checksum) and checksum_of(statement) == statement.checksum


def tariff_in_force(
    instrument_id: int, rate_category: str, purpose: str, day: dt.date
) -> Tariff | None:
    return (
        Tariff.objects.filter(
            instrument_id=instrument_id,
            rate_category=rate_category,
            purpose=purpose,
            valid_from__lte=day,
        )
        .filter(Q(valid_to__isnull=True) | Q(valid_to__gte=day))
        .first()
    )


def tariffs_in_force(day: dt.date) -> QuerySet[Tariff]:
    """The price list on a day: one version per instrument × rate category × purpose."""
    return (
        Tariff.objects.filter(valid_from__lte=day)
        .filter(Q(valid_to__isnull=True) | Q(valid_to__gte=day))
        .select_related("instrument")
    )


def tariff_is_used(tariff: Tariff) -> bool:
    """Whether a final statement's line was priced with this version (it may then not change)."""
    return Charge.objects.filter(
        tariff_id=tariff.pk, statement__state=StatementState.FINAL
    ).exists()


def overlapping_tariffs(
    *,
    instrument_id: int,
    rate_category: str,
    purpose: str,
    valid_from: dt.date,
    valid_to: dt.date | None,
    exclude_ids: tuple[int, ...] = (),
) -> QuerySet[Tariff]:
    qs = Tariff.objects.filter(
        instrument_id=instrument_id, rate_category=rate_category, purpose=purpose
    ).filter(Q(valid_to__isnull=True) | Q(valid_to__gte=valid_from))
    if valid_to is not None:
        qs = qs.filter(valid_from__lte=valid_to)
    return qs.exclude(pk__in=exclude_ids)
