"""The checksum that seals a final statement: SHA-256 (FIPS 180-4) over a canonical text.

Every line contributes one row of fields joined by a unit separator (U+001F), rows joined by
newlines, after a header row with the statement's own identity. Decimals are written with their
two places and times in UTC ISO 8601, so the same lines always give the same digest on any
database and in any time zone. Anyone can recompute it from a statement's CSV-level data.
"""

from __future__ import annotations

import datetime as dt
import hashlib
from collections.abc import Iterable, Mapping
from decimal import Decimal
from typing import Any

VERSION = "beamledger-statement-v1"

# The fields of a line that the checksum covers, in order.
LINE_FIELDS = (
    "position",
    "kind",
    "session_id",
    "booking_id",
    "tariff_id",
    "instrument_id",
    "user_id",
    "purpose",
    "starts_at",
    "ends_at",
    "billed_minutes",
    "out_of_hours_minutes",
    "staff_minutes",
    "hourly_rate",
    "staff_hourly_rate",
    "out_of_hours_factor",
    "share",
    "currency",
    "amount",
    "description",
    "reason",
    "created_by_id",
    "corrects_id",
)

_SEP = "\x1f"


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, dt.datetime):
        return value.astimezone(dt.UTC).isoformat()
    if isinstance(value, Decimal):
        return format(value, "f")
    return str(value).replace(_SEP, " ").replace("\n", " ")


def statement_digest(header: Mapping[str, Any], lines: Iterable[Mapping[str, Any]]) -> str:
    """Hex SHA-256 of the statement header (account, month, number, currency, total) and lines."""
    rows = [
        _SEP.join(
            [VERSION]
            + [
                _text(header[k])
                for k in ("account_id", "account_code", "month", "number", "currency", "total")
            ]
        )
    ]
    rows.extend(_SEP.join(_text(line[name]) for name in LINE_FIELDS) for line in lines)
    return hashlib.sha256("\n".join(rows).encode("utf-8")).hexdigest()
