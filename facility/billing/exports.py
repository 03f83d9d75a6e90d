"""CSV exports (RFC 4180): one statement, a month for the finance office, and usage reports.

Statement CSV columns, in this order (the finance office's import relies on it):

  statement_number  S-000042, empty for a draft
  account_code      cost centre, grant or purchase order code
  group             research group (or client organisation) owning the account
  user              username of whoever used or booked the time (empty on adjustments)
  instrument        instrument code
  date              local date the priced time starts, YYYY-MM-DD (facility time zone)
  start, end        local start and end, ISO 8601 with UTC offset (a DST day stays unambiguous)
  hours             billed hours after rounding up to the increment, two places
  purpose           own_use, assisted, training, service (empty on adjustments)
  rate              hourly rate of the tariff (empty on adjustments)
  amount            line amount, two places, '.' as the decimal mark, '-' for credits
  currency          ISO 4217 code
  kind              use, late_cancellation, no_show, adjustment
  description       how the amount was reached, or the adjustment's reason

Money is written from Decimal as text, never through a float. Text cells that a spreadsheet
would run as a formula (starting with = + - @, tab or carriage return) get a leading apostrophe,
as the OWASP "CSV Injection" guidance recommends; numeric columns are left as they are.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from collections.abc import Iterable, Iterator
from decimal import ROUND_HALF_UP, Decimal
from typing import IO, Any

from django.utils import timezone

from facility.billing import queries, usage
from facility.billing.models import Charge, Statement, StatementState

STATEMENT_COLUMNS = (
    "statement_number",
    "account_code",
    "group",
    "user",
    "instrument",
    "date",
    "start",
    "end",
    "hours",
    "purpose",
    "rate",
    "amount",
    "currency",
    "kind",
    "description",
)
_TEXT_COLUMNS = {"account_code", "group", "user", "instrument", "description"}
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

USAGE_COLUMNS = (
    "month",
    "instrument",
    "name",
    "booked_hours",
    "used_hours",
    "no_show_hours",
    "late_cancelled_hours",
    "downtime_hours",
    "bookable_hours",
    "utilisation",
    "sessions",
    "bookings",
)
BREAKDOWN_COLUMNS = (
    "month",
    "instrument",
    "dimension",
    "key",
    "label",
    "booked_hours",
    "used_hours",
    "sessions",
)
TOP_USER_COLUMNS = ("month", "rank", "user", "used_hours", "sessions")


def safe_text(value: str) -> str:
    """Neutralise a spreadsheet formula in a text cell (OWASP CSV Injection)."""
    return "'" + value if value.startswith(_FORMULA_START) else value


def _local(moment: dt.datetime | None) -> dt.datetime | None:
    return timezone.localtime(moment, timezone.get_default_timezone()) if moment else None


def _hours(minutes: int) -> str:
    return str((Decimal(minutes) / 60).quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))


def line_row(line: Charge, statement: Statement, *, escape: bool = True) -> dict[str, str]:
    """One row of a statement line, every value a string (`escape` for spreadsheets)."""
    start, end = _local(line.starts_at), _local(line.ends_at)
    is_adjustment = line.kind == "adjustment"
    row = {
        "statement_number": statement.reference,
        "account_code": statement.account.code,
        "group": statement.account.group.name,
        "user": line.user.get_username() if line.user_id else "",
        "instrument": line.instrument.code if line.instrument_id else "",
        "date": f"{start:%Y-%m-%d}" if start else "",
        "start": start.isoformat(timespec="minutes") if start else "",
        "end": end.isoformat(timespec="minutes") if end else "",
        "hours": "" if is_adjustment else _hours(line.billed_minutes),
        "purpose": line.purpose,
        "rate": "" if line.hourly_rate is None or is_adjustment else str(line.hourly_rate),
        "amount": str(line.amount),
        "currency": line.currency,
        "kind": line.kind,
        "description": line.description,
    }
    if escape:
        for name in _TEXT_COLUMNS:
            row[name] = safe_text(row[name])
    return row


def statement_rows(statement: Statement) -> Iterator[dict[str, str]]:
    statement = Statement.objects.select_related("account", "account__group").get(pk=statement.pk)
    for line in queries.lines_of(statement):
        yield line_row(line, statement)


def month_rows(month: dt.date, *, include_drafts: bool = False) -> Iterator[dict[str, str]]:
    """Every line of the month's final statements (and drafts, if asked), statement by statement."""
    states = [StatementState.FINAL] + ([StatementState.DRAFT] if include_drafts else [])
    lines = (
        Charge.objects.filter(statement__month=month, statement__state__in=states)
        .select_related("statement", "statement__account", "statement__account__group")
        .select_related("instrument", "user")
        .order_by("statement__number", "statement__account__code", "position", "id")
    )
    for line in lines.iterator(chunk_size=2000):
        yield line_row(line, line.statement)


def write_csv(
    rows: Iterable[dict[str, Any]], columns: tuple[str, ...], out: IO[str] | None = None
) -> str:
    """Write rows as CSV with a header; returns the text when no stream is given."""
    buffer = out if out is not None else io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns, extrasaction="raise", lineterminator="\r\n")
    writer.writeheader()
    for row in rows:
        writer.writerow(row)
    return buffer.getvalue() if out is None else ""


def statement_csv(statement: Statement, out: IO[str] | None = None) -> str:
    return write_csv(statement_rows(statement), STATEMENT_COLUMNS, out)


def month_csv(month: dt.date, out: IO[str] | None = None, *, include_drafts: bool = False) -> str:
    return write_csv(month_rows(month, include_drafts=include_drafts), STATEMENT_COLUMNS, out)


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, dt.date):
        return f"{value:%Y-%m}"
    return str(value)


def usage_csv(month: dt.date, out: IO[str] | None = None) -> str:
    rows = (
        {name: _text(getattr(r, name)) for name in USAGE_COLUMNS}
        for r in usage.instrument_usage(month)
    )
    return write_csv(rows, USAGE_COLUMNS, out)


def breakdown_csv(month: dt.date, dimension: usage.Dimension, out: IO[str] | None = None) -> str:
    rows = (
        {name: safe_text(_text(getattr(r, name))) for name in BREAKDOWN_COLUMNS}
        for r in usage.usage_breakdown(month, dimension)
    )
    return write_csv(rows, BREAKDOWN_COLUMNS, out)


def top_users_csv(month: dt.date, out: IO[str] | None = None, *, limit: int = 10) -> str:
    rows = (
        {
            "month": f"{month:%Y-%m}",
            "rank": str(rank),
            "user": safe_text(r.username),
            "used_hours": str(r.used_hours),
            "sessions": str(r.sessions),
        }
        for rank, r in enumerate(usage.top_users(month, limit=limit), start=1)
    )
    return write_csv(rows, TOP_USER_COLUMNS, out)


def statement_data(statement: Statement) -> dict[str, Any]:
    """A statement and its lines as JSON-ready data: money and rates as strings."""
    statement = Statement.objects.select_related("account", "account__group").get(pk=statement.pk)
    return {
        "id": statement.pk,
        "number": statement.reference or None,
        "account": statement.account.code,
        "group": statement.account.group.name,
        "month": f"{statement.month:%Y-%m}",
        "state": statement.state,
        "currency": statement.currency,
        "total": str(statement.total),
        "checksum": statement.checksum or None,
        "problems": list(statement.problems),
        "finalised_at": statement.finalised_at.isoformat() if statement.finalised_at else None,
        "lines": [line_row(line, statement, escape=False) for line in queries.lines_of(statement)],
    }
