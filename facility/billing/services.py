"""Writes on billing: draft and finalise statements, adjustments, tariffs and holidays.

Every rule lives here; the admin, the commands, the API and the beat job only call these
functions. Drafting is idempotent: a draft is rebuilt from the logbook and bookings each time,
keeping only the adjustment lines people added. A final statement never changes.
"""

from __future__ import annotations

import datetime as dt
import logging
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from decimal import Decimal, InvalidOperation
from typing import Any

from django.conf import settings
from django.contrib.auth.models import AbstractBaseUser
from django.db import IntegrityError, OperationalError, transaction
from django.db.models import Max, Q
from django.utils import timezone

from facility.billing import drafting, queries
from facility.billing.checksum import LINE_FIELDS
from facility.billing.drafting import PricingContext
from facility.billing.models import (
    Charge,
    ChargeBasis,
    ChargeKind,
    Holiday,
    Statement,
    StatementSequence,
    StatementState,
    Tariff,
)
from facility.billing.months import first_of, month_bounds, next_month
from facility.bookings.models import Purpose
from facility.errors import Closed, Conflict, Invalid, NotAllowed
from facility.instruments.models import Instrument
from facility.people.models import Account, RateCategory
from facility.people.queries import is_staff
from facility.people.services import notify, notify_staff

log = logging.getLogger(__name__)

CENT = Decimal("0.01")
SEQUENCE = "statement"
# Lines moved between drafts are deleted in chunks: SQLite allows a bounded number of parameters.
_CHUNK = 500
# A draft run that meets a concurrent run (deadlock, or the same session inserted elsewhere
# first) starts that account again this many times before reporting it.
_ATTEMPTS = 3
_CURRENCY = re.compile(r"^[A-Z]{3}$")


def _tz() -> dt.tzinfo:
    return timezone.get_default_timezone()


def _require_staff(by: AbstractBaseUser | None, action: str) -> None:
    if not is_staff(by):
        raise NotAllowed(f"Only facility staff can {action}.")


def _month(month: dt.date) -> dt.date:
    if not isinstance(month, dt.date):
        raise Invalid("The month must be a date (its first day).")
    return first_of(month)


# --- Drafting -------------------------------------------------------------------------------


@dataclass
class DraftRun:
    """What a month's draft run did (money as Decimal; `as_dict` gives strings)."""

    month: dt.date
    statements: list[int] = field(default_factory=list)
    lines: int = 0
    totals: dict[str, Decimal] = field(default_factory=dict)
    removed: int = 0
    skipped_final: list[str] = field(default_factory=list)
    problems: dict[str, list[str]] = field(default_factory=dict)
    failed: dict[str, str] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        return {
            "month": f"{self.month:%Y-%m}",
            "statements": len(self.statements),
            "lines": self.lines,
            "totals": {cur: str(amount) for cur, amount in sorted(self.totals.items())},
            "removed": self.removed,
            "skipped_final": self.skipped_final,
            "problems": self.problems,
            "failed": self.failed,
        }


def _lock_existing(account: Account, month: dt.date) -> Statement | None:
    return (
        Statement.objects.select_for_update(of=("self",))
        .select_related("account")
        .filter(account=account, month=month)
        .order_by("pk")
        .first()
    )


def _closed(statement: Statement) -> Closed:
    return Closed(
        f"Statement {statement.reference} for {statement.account.code} "
        f"{statement.month:%Y-%m} is final and cannot change; put a correction on a later "
        "statement as an adjustment."
    )


def _create_locked(account: Account, month: dt.date) -> Statement:
    try:
        with transaction.atomic():
            created = Statement.objects.create(account=account, month=month)
    except IntegrityError:
        # Another run created it first; use theirs.
        created = Statement.objects.get(account=account, month=month)
    statement = (
        Statement.objects.select_for_update(of=("self",))
        .select_related("account")
        .get(pk=created.pk)
    )
    if statement.is_final:
        raise _closed(statement)
    return statement


def _delete_in_chunks(ids: Iterable[int], field_name: str, *, keep: int) -> set[int]:
    """Delete other drafts' lines that hold these sessions/bookings; returns the drafts touched."""
    ids = sorted(ids)
    touched: set[int] = set()
    for start in range(0, len(ids), _CHUNK):
        lines = Charge.objects.filter(
            statement__state=StatementState.DRAFT,
            **{f"{field_name}__in": ids[start : start + _CHUNK]},
        ).exclude(statement_id=keep)
        holders = set(lines.values_list("statement_id", flat=True))
        if holders:
            touched |= holders
            lines.delete()
    return touched


def _refresh(statement: Statement, *, problems: list[str] | None = None, now=None) -> Statement:
    """Recompute currency and total from the lines (the total is always the sum of lines)."""
    currencies = set(
        Charge.objects.filter(statement_id=statement.pk).values_list("currency", flat=True)
    )
    statement.currency = currencies.pop() if len(currencies) == 1 else ""
    statement.total = queries.sum_of_lines(statement)
    fields = ["currency", "total"]
    if problems is not None:
        statement.problems = problems
        fields.append("problems")
    if now is not None:
        statement.drafted_at = now
        fields.append("drafted_at")
    statement.save(update_fields=fields)
    return statement


# What makes two priced lines the same line: the checksummed fields that pricing sets (the
# manual ones — reason, who made it, what it corrects — belong to adjustments only).
_SAME_LINE = tuple(f for f in LINE_FIELDS if f not in {"reason", "created_by_id", "corrects_id"})


def _regenerate(
    account: Account, month: dt.date, ctx: PricingContext, now: dt.datetime
) -> Statement | None:
    """Rebuild the draft of (account, month) inside the caller's transaction.

    Lines that come out the same as before are left in place (a rerun writes almost nothing);
    otherwise the priced lines are replaced. Adjustment lines are kept and follow the priced ones.
    """
    statement = _lock_existing(account, month)
    if statement is not None and statement.is_final:
        raise _closed(statement)
    draft = drafting.build(account.id, month, ctx)
    for position, line in enumerate(draft.lines, start=1):
        line.position = position
    adjustments = (
        list(statement.lines.filter(kind=ChargeKind.ADJUSTMENT).order_by("created_at", "id"))
        if statement is not None
        else []
    )
    if not (draft.lines or adjustments or draft.problems):
        if statement is not None:
            statement.delete()
        return None
    if statement is None:
        statement = _create_locked(account, month)
    # A session whose account was corrected since the last run sits on another draft: move it.
    touched = _delete_in_chunks(draft.session_ids, "session_id", keep=statement.pk)
    touched |= _delete_in_chunks(draft.booking_ids, "booking_id", keep=statement.pk)
    priced = Charge.objects.filter(statement=statement).exclude(kind=ChargeKind.ADJUSTMENT)
    before = list(priced.order_by("position", "id").values(*_SAME_LINE))
    after = [{name: getattr(line, name) for name in _SAME_LINE} for line in draft.lines]
    if before != after:
        priced.delete()
        for line in draft.lines:
            line.statement = statement
        Charge.objects.bulk_create(draft.lines, batch_size=500)
    moved = []
    for position, line in enumerate(adjustments, start=len(draft.lines) + 1):
        if line.position != position:
            line.position = position
            moved.append(line)
    Charge.objects.bulk_update(moved, ["position"])
    problems = list(draft.problems)
    currencies = draft.currencies | {a.currency for a in adjustments}
    if len(currencies) > 1 and len(draft.currencies) <= 1:
        problems.append(
            "Adjustments and lines are in different currencies ("
            + ", ".join(sorted(currencies))
            + "); a statement holds one."
        )
    _refresh(statement, problems=problems, now=now)
    for other in Statement.objects.filter(pk__in=touched - {statement.pk}):
        _refresh(other)
    return statement


def draft_statement(
    *,
    account: Account,
    month: dt.date,
    by: AbstractBaseUser | None = None,
    now: dt.datetime | None = None,
) -> Statement | None:
    """(Re)generate the draft statement of `account` for `month` from the logbook and bookings.

    Idempotent: running it again without new data gives the same lines. Returns None (and
    removes an empty draft) when the account has nothing for the month. `by` None means the
    system (the beat job); a person must be staff.
    """
    if by is not None:
        _require_staff(by, "draft statements")
    month = _month(month)
    now = now or timezone.now()
    ctx = PricingContext.load(_tz())
    with transaction.atomic():
        return _regenerate(account, month, ctx, now)


def draft_month(
    *,
    month: dt.date,
    by: AbstractBaseUser | None = None,
    now: dt.datetime | None = None,
    tell_staff: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> DraftRun:
    """Draft the statements of every account with activity in `month`.

    Each account is drafted in its own transaction, so one account's trouble does not hold the
    others back; final statements are left alone. With `tell_staff`, staff get one message per
    month (a second run does not notify again).
    """
    if by is not None:
        _require_staff(by, "draft statements")
    month = _month(month)
    now = now or timezone.now()
    tz = _tz()
    ctx = PricingContext.load(tz)
    account_ids = sorted(drafting.accounts_with_activity(month, tz))
    accounts = Account.objects.in_bulk(account_ids)
    run = DraftRun(month=month)
    for done, account_id in enumerate(account_ids, start=1):
        account = accounts[account_id]
        statement = _draft_with_retries(account, month, ctx, now, run)
        if statement is not None:
            run.statements.append(statement.pk)
            run.lines += statement.lines.count()
            if statement.currency:
                run.totals[statement.currency] = (
                    run.totals.get(statement.currency, Decimal("0.00")) + statement.total
                )
            if statement.problems:
                run.problems[account.code] = list(statement.problems)
        if progress is not None:
            progress(done, len(account_ids))
    if tell_staff:
        _tell_staff_about(run)
    return run


def _draft_with_retries(
    account: Account, month: dt.date, ctx: PricingContext, now: dt.datetime, run: DraftRun
) -> Statement | None:
    for attempt in range(1, _ATTEMPTS + 1):
        try:
            with transaction.atomic():
                existing = (
                    Statement.objects.filter(account=account, month=month).order_by("pk").first()
                )
                if existing is not None and existing.is_final:
                    run.skipped_final.append(account.code)
                    return None
                before = existing is not None
                statement = _regenerate(account, month, ctx, now)
                if statement is None and before:
                    run.removed += 1
                return statement
        except (IntegrityError, OperationalError) as exc:
            # A concurrent run took a session first or the database broke a deadlock.
            log.warning("drafting %s %s, attempt %d: %s", account.code, month, attempt, exc)
            if attempt == _ATTEMPTS:
                run.failed[account.code] = f"not drafted after {attempt} attempts: {exc}"
        except Closed:
            run.skipped_final.append(account.code)
            return None
    return None


def _tell_staff_about(run: DraftRun) -> None:
    totals = ", ".join(f"{amount} {cur}" for cur, amount in sorted(run.totals.items())) or "none"
    lines = [
        f"{len(run.statements)} draft statements with {run.lines} lines; totals {totals}.",
    ]
    if run.problems:
        lines.append(f"{len(run.problems)} accounts have problems to resolve before finalising:")
        lines.extend(
            f"- {code}: {'; '.join(items)}" for code, items in sorted(run.problems.items())
        )
    if run.skipped_final:
        lines.append("Already final (unchanged): " + ", ".join(sorted(run.skipped_final)))
    if run.failed:
        lines.append("Not drafted, run again: " + ", ".join(sorted(run.failed)))
    lines.append("Finalising stays a deliberate step for each statement.")
    notify_staff(
        subject=f"Draft statements for {run.month:%B %Y} are ready",
        body="\n".join(lines),
        topic=f"billing:drafts:{run.month:%Y-%m}",
    )


# --- Finalising -----------------------------------------------------------------------------


def _next_number() -> int:
    """The next statement number, without gaps: the counter row stays locked until commit."""
    sequence, _ = StatementSequence.objects.select_for_update().get_or_create(name=SEQUENCE)
    sequence.last_number += 1
    sequence.save(update_fields=["last_number"])
    return sequence.last_number


def finalise_statement(
    *,
    statement: Statement,
    by: AbstractBaseUser,
    expected_checksum: str | None = None,
    now: dt.datetime | None = None,
) -> Statement:
    """Seal a draft: rebuild it from the data one last time, number it, checksum it, freeze it.

    The month must be over and the draft free of problems. `expected_checksum` (the draft's
    `queries.checksum_of` as the reviewer saw it) refuses the step when the lines changed since.
    """
    _require_staff(by, "finalise statements")
    now = now or timezone.now()
    with transaction.atomic():
        current = (
            Statement.objects.select_for_update(of=("self",))
            .select_related("account")
            .get(pk=statement.pk)
        )
        if current.is_final:
            raise _closed(current)
        _, month_end = month_bounds(current.month, _tz())
        if now < month_end:
            raise Conflict(
                f"{current.month:%B %Y} is not over yet; finalise from "
                f"{next_month(current.month):%d %B %Y}."
            )
        rebuilt = _regenerate(current.account, current.month, PricingContext.load(_tz()), now)
        if rebuilt is None:
            raise Invalid(
                f"{current.account.code} has nothing to bill for {current.month:%B %Y}; "
                "there is nothing to finalise."
            )
        if rebuilt.problems:
            shown = "; ".join(rebuilt.problems[:3])
            more = f" (and {len(rebuilt.problems) - 3} more)" if len(rebuilt.problems) > 3 else ""
            raise Conflict(f"This statement cannot be finalised yet: {shown}{more}")
        if not rebuilt.currency:
            raise Conflict("The statement's lines are in more than one currency.")
        if expected_checksum is not None and expected_checksum != queries.checksum_of(rebuilt):
            raise Conflict(
                "The statement changed since it was reviewed (new or changed sessions); "
                "review the draft again and finalise that."
            )
        number = _next_number()
        rebuilt.number = number
        rebuilt.checksum = queries.checksum_of(rebuilt, number=number)
        rebuilt.state = StatementState.FINAL
        rebuilt.finalised_at = now
        rebuilt.finalised_by = by
        rebuilt.save(update_fields=["number", "checksum", "state", "finalised_at", "finalised_by"])
        transaction.on_commit(lambda: _tell_leader(rebuilt))
        return rebuilt


def _tell_leader(statement: Statement) -> None:
    leader = statement.account.group.leader
    if leader is None:
        return
    notify(
        user=leader,
        subject=(
            f"Statement {statement.reference} for {statement.account.code} "
            f"({statement.month:%B %Y}): {statement.total} {statement.currency}"
        ),
        body="The facility has finalised this statement; the PDF and CSV are available.",
        topic=f"billing:final:{statement.pk}",
    )


# --- Adjustments ----------------------------------------------------------------------------


def _money(value: Any, name: str, *, allow_negative: bool = False) -> Decimal:
    """A Decimal with at most two places. Floats are refused: they cannot hold cents exactly."""
    if isinstance(value, float | bool):
        raise Invalid(f"Give {name} as a decimal string such as '12.50', not a float.")
    try:
        amount = Decimal(str(value).strip()) if not isinstance(value, Decimal) else value
    except InvalidOperation:
        raise Invalid(
            f"{name} {value!r} is not a number.", fields={name: ["Not a number."]}
        ) from None
    if not amount.is_finite():
        raise Invalid(f"{name} must be a finite number.", fields={name: ["Not finite."]})
    if amount != amount.quantize(CENT):
        raise Invalid(
            f"{name} {amount} has more than two decimal places.",
            fields={name: ["At most two decimal places."]},
        )
    if amount < 0 and not allow_negative:
        raise Invalid(f"{name} must not be negative.", fields={name: ["Not negative."]})
    return amount.quantize(CENT)


def add_adjustment(
    *,
    account: Account,
    amount: Decimal | str,
    reason: str,
    by: AbstractBaseUser,
    month: dt.date | None = None,
    corrects: Statement | None = None,
    currency: str | None = None,
) -> Charge:
    """Add a credit (negative) or debit (positive) line with its reason to a draft statement.

    A correction of a final statement (`corrects`) goes on a later month's statement — by
    default the next month's; the final statement itself never changes.
    """
    _require_staff(by, "add adjustments")
    value = _money(amount, "amount", allow_negative=True)
    if value == 0:
        raise Invalid("An adjustment of 0.00 changes nothing.", fields={"amount": ["Not zero."]})
    reason = (reason or "").strip()
    if not reason:
        raise Invalid("Say why: an adjustment needs a reason.", fields={"reason": ["Required."]})
    if len(reason) > 250:
        raise Invalid("Keep the reason under 250 characters.", fields={"reason": ["Too long."]})
    if corrects is not None:
        if corrects.account_id != account.id:
            raise Invalid("The corrected statement belongs to another account.")
        if not corrects.is_final:
            raise Invalid(
                "Only a final statement is corrected by an adjustment; regenerate the draft "
                "or add the adjustment to it directly."
            )
        month = _month(month) if month is not None else next_month(corrects.month)
        if month <= corrects.month:
            raise Invalid("A correction goes on a statement of a later month.")
    if month is None:
        raise Invalid("Say which month's statement the adjustment goes on.")
    month = _month(month)
    with transaction.atomic():
        statement = _lock_existing(account, month) or _create_locked(account, month)
        if statement.is_final:
            raise _closed(statement)
        default = statement.currency or (corrects.currency if corrects else "") or _currency()
        chosen = (currency or default).upper()
        if not _CURRENCY.match(chosen):
            raise Invalid(f"Currency {chosen!r} is not a three-letter ISO 4217 code.")
        if statement.currency and chosen != statement.currency:
            raise Invalid(f"This statement is in {statement.currency}; the adjustment must be too.")
        position = (statement.lines.aggregate(top=Max("position"))["top"] or 0) + 1
        about = f"Correction to statement {corrects.reference}" if corrects else "Adjustment"
        line = Charge.objects.create(
            statement=statement,
            position=position,
            kind=ChargeKind.ADJUSTMENT,
            currency=chosen,
            amount=value,
            reason=reason,
            created_by=by,
            corrects=corrects,
            description=f"{about}: {reason}"[:300],
        )
        _refresh(statement)
        return line


def remove_adjustment(*, line: Charge, by: AbstractBaseUser) -> None:
    """Take an adjustment off a draft statement (a final statement's lines never change)."""
    _require_staff(by, "remove adjustments")
    with transaction.atomic():
        statement = (
            Statement.objects.select_for_update(of=("self",))
            .select_related("account")
            .get(pk=line.statement_id)
        )
        if statement.is_final:
            raise _closed(statement)
        line = Charge.objects.get(pk=line.pk)
        if line.kind != ChargeKind.ADJUSTMENT:
            raise Invalid(
                "Only adjustment lines are removed by hand; priced lines follow the data."
            )
        line.delete()
        _refresh(statement)


def _currency() -> str:
    return getattr(settings, "BILLING_CURRENCY", "EUR")


# --- Tariffs --------------------------------------------------------------------------------

TARIFF_TERMS = (
    "hourly_rate",
    "staff_hourly_rate",
    "currency",
    "increment_minutes",
    "minimum_charge",
    "out_of_hours_factor",
    "charge_basis",
    "late_cancellation_share",
    "no_show_share",
    "valid_from",
    "valid_to",
    "note",
)


def _share(value: Any, name: str) -> Decimal:
    if isinstance(value, float):
        raise Invalid(f"Give {name} as a decimal string such as '0.5', not a float.")
    try:
        share = Decimal(str(value))
    except InvalidOperation:
        raise Invalid(f"{name} {value!r} is not a number.") from None
    if not share.is_finite() or not Decimal(0) <= share <= Decimal(1):
        raise Invalid(f"{name} must be between 0 and 1.", fields={name: ["Between 0 and 1."]})
    if share != share.quantize(Decimal("0.001")):
        raise Invalid(f"{name} has more than three decimal places.")
    return share


def clean_tariff_terms(values: dict[str, Any]) -> dict[str, Any]:
    """Check and normalise a tariff's terms; raises Invalid with per-field messages."""
    cleaned = dict(values)
    for name in ("hourly_rate", "staff_hourly_rate", "minimum_charge"):
        if name in cleaned:
            cleaned[name] = _money(cleaned[name], name)
    if "out_of_hours_factor" in cleaned:
        factor = cleaned["out_of_hours_factor"]
        if isinstance(factor, float):
            raise Invalid("Give the out-of-hours factor as a decimal string such as '1.5'.")
        try:
            factor = Decimal(str(factor))
        except InvalidOperation:
            raise Invalid("The out-of-hours factor is not a number.") from None
        if not factor.is_finite() or factor <= 0 or factor > 99:
            raise Invalid("The out-of-hours factor must be more than 0 (and below 100).")
        if factor != factor.quantize(Decimal("0.001")):
            raise Invalid("The out-of-hours factor has more than three decimal places.")
        cleaned["out_of_hours_factor"] = factor
    for name in ("late_cancellation_share", "no_show_share"):
        if name in cleaned:
            cleaned[name] = _share(cleaned[name], name)
    if "increment_minutes" in cleaned:
        increment = cleaned["increment_minutes"]
        if (
            not isinstance(increment, int)
            or isinstance(increment, bool)
            or not 1 <= increment <= 1440
        ):
            raise Invalid("The billing increment must be a whole number of minutes from 1 to 1440.")
    if "currency" in cleaned:
        cleaned["currency"] = str(cleaned["currency"]).strip().upper()
        if not _CURRENCY.match(cleaned["currency"]):
            raise Invalid("The currency must be a three-letter ISO 4217 code such as EUR.")
    if "charge_basis" in cleaned and cleaned["charge_basis"] not in ChargeBasis.values:
        raise Invalid(f"Charge basis must be one of {', '.join(ChargeBasis.values)}.")
    start, end = cleaned.get("valid_from"), cleaned.get("valid_to")
    if start is not None and end is not None and end < start:
        raise Invalid("A tariff must end on or after the day it starts.")
    return cleaned


def _first_moment(day: dt.date) -> dt.datetime:
    return dt.datetime.combine(day, dt.time.min, tzinfo=_tz())


def _billed_on_or_after(tariff: Tariff, day: dt.date) -> bool:
    since = _first_moment(day)
    return (
        Charge.objects.filter(tariff=tariff, statement__state=StatementState.FINAL)
        .filter(
            Q(session__started_at__gte=since)
            | Q(session__isnull=True, booking__starts_at__gte=since)
        )
        .exists()
    )


def add_tariff(
    *,
    instrument: Instrument,
    rate_category: str,
    purpose: str,
    hourly_rate: Decimal | str,
    valid_from: dt.date,
    by: AbstractBaseUser,
    valid_to: dt.date | None = None,
    currency: str | None = None,
    increment_minutes: int = 15,
    minimum_charge: Decimal | str = "0.00",
    out_of_hours_factor: Decimal | str = "1.000",
    staff_hourly_rate: Decimal | str = "0.00",
    charge_basis: str = ChargeBasis.USED,
    late_cancellation_share: Decimal | str = "0.000",
    no_show_share: Decimal | str = "0.000",
    note: str = "",
) -> Tariff:
    """Add a tariff version. An open-ended earlier version ends the day before this one starts.

    Versions never overlap, and a version already used on a final statement is never shortened
    below the days it priced: prices already billed stay as billed.
    """
    _require_staff(by, "set tariffs")
    if rate_category not in RateCategory.values:
        raise Invalid(f"Rate category must be one of {', '.join(RateCategory.values)}.")
    if purpose not in Purpose.values:
        raise Invalid(f"Purpose must be one of {', '.join(Purpose.values)}.")
    terms = clean_tariff_terms(
        {
            "hourly_rate": hourly_rate,
            "staff_hourly_rate": staff_hourly_rate,
            "currency": currency or _currency(),
            "increment_minutes": increment_minutes,
            "minimum_charge": minimum_charge,
            "out_of_hours_factor": out_of_hours_factor,
            "charge_basis": charge_basis,
            "late_cancellation_share": late_cancellation_share,
            "no_show_share": no_show_share,
            "valid_from": valid_from,
            "valid_to": valid_to,
            "note": note,
        }
    )
    key = {"instrument": instrument, "rate_category": rate_category, "purpose": purpose}
    with transaction.atomic():
        list(Tariff.objects.select_for_update().filter(**key))  # one writer per tariff at a time
        previous = check_tariff_version(**key, valid_from=valid_from, valid_to=valid_to)
        if previous is not None:
            previous.valid_to = valid_from - dt.timedelta(days=1)
            previous.save(update_fields=["valid_to"])
        return Tariff.objects.create(**key, **terms, created_by=by)


def check_tariff_version(
    *,
    instrument: Instrument,
    rate_category: str,
    purpose: str,
    valid_from: dt.date,
    valid_to: dt.date | None,
) -> Tariff | None:
    """Whether a new version may start on `valid_from`; returns the version it would close.

    An open-ended new version closes the open-ended one before it (the day before it starts),
    unless that one already priced later days on a final statement. Any other overlap is refused.
    Read-only: add_tariff calls it under lock, forms call it to show the refusal early.
    """
    previous = None
    if valid_to is None:
        previous = Tariff.objects.filter(
            instrument=instrument,
            rate_category=rate_category,
            purpose=purpose,
            valid_to__isnull=True,
            valid_from__lt=valid_from,
        ).first()
    clash = queries.overlapping_tariffs(
        instrument_id=instrument.id,
        rate_category=rate_category,
        purpose=purpose,
        valid_from=valid_from,
        valid_to=valid_to,
        exclude_ids=(previous.pk,) if previous else (),
    ).first()
    if clash is not None:
        raise Conflict(
            f"The new tariff's dates overlap {clash}; versions of one tariff may not overlap."
        )
    if previous is not None and _billed_on_or_after(previous, valid_from):
        raise Conflict(
            f"{previous} already priced sessions on or after {valid_from:%Y-%m-%d} on a "
            "final statement; start the new version after them."
        )
    return previous


def update_tariff(*, tariff: Tariff, by: AbstractBaseUser, **changes: Any) -> Tariff:
    """Change a tariff version that no final statement has used yet (drafts follow on redraft)."""
    _require_staff(by, "set tariffs")
    unknown = set(changes) - set(TARIFF_TERMS)
    if unknown:
        raise Invalid(f"These tariff fields cannot be changed: {', '.join(sorted(unknown))}.")
    with transaction.atomic():
        tariff = (
            Tariff.objects.select_for_update(of=("self",))
            .select_related("instrument")
            .get(pk=tariff.pk)
        )
        if queries.tariff_is_used(tariff):
            raise Closed(
                f"{tariff} has priced a final statement and is not edited in place; add a new "
                "version from the day the new terms apply."
            )
        merged = {name: getattr(tariff, name) for name in TARIFF_TERMS} | changes
        terms = clean_tariff_terms(merged)
        clash = queries.overlapping_tariffs(
            instrument_id=tariff.instrument_id,
            rate_category=tariff.rate_category,
            purpose=tariff.purpose,
            valid_from=terms["valid_from"],
            valid_to=terms["valid_to"],
            exclude_ids=(tariff.pk,),
        ).first()
        if clash is not None:
            raise Conflict(f"The changed dates overlap {clash}.")
        for name, value in terms.items():
            setattr(tariff, name, value)
        tariff.save()
        return tariff


# --- Holidays -------------------------------------------------------------------------------


def add_holiday(*, day: dt.date, name: str, by: AbstractBaseUser) -> Holiday:
    """Record a public holiday (out of hours all day). Final statements keep their prices."""
    _require_staff(by, "set holidays")
    name = (name or "").strip()
    if not name:
        raise Invalid("Name the holiday.", fields={"name": ["Required."]})
    with transaction.atomic():
        holiday, created = Holiday.objects.get_or_create(day=day, defaults={"name": name[:120]})
        if not created and holiday.name != name[:120]:
            holiday.name = name[:120]
            holiday.save(update_fields=["name"])
        return holiday


def remove_holiday(*, day: dt.date, by: AbstractBaseUser) -> int:
    _require_staff(by, "set holidays")
    with transaction.atomic():
        deleted, _ = Holiday.objects.filter(day=day).delete()
        return deleted
