"""Reads for the pages: what a late cancellation would cost, how far month end is.

The quote prices the booking with drafting's own function, so the figure shown before a person
confirms a cancellation is the figure the statement will carry.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from decimal import Decimal
from typing import Any

from facility.billing import queries
from facility.billing.drafting import Draft, PricingContext, price_booking
from facility.billing.models import StatementState
from facility.billing.months import local_month_of
from facility.bookings.models import Booking, BookingState


@dataclass(frozen=True)
class Quote:
    amount: Decimal
    currency: str
    description: str
    share: Decimal


def late_cancellation_quote(booking: Booking) -> Quote | None:
    """What cancelling `booking` late would cost; None when no tariff applies or it is free."""
    ctx = PricingContext.load()
    profile = getattr(booking.user, "profile", None)
    row = {
        "id": booking.id,
        "instrument_id": booking.instrument_id,
        "user_id": booking.user_id,
        "user__profile__rate_category": profile.rate_category if profile else "",
        "purpose": booking.purpose,
        "state": BookingState.LATE_CANCELLED,
        "starts_at": booking.starts_at,
        "ends_at": booking.ends_at,
    }
    draft = Draft()
    price_booking(row, local_month_of(booking.starts_at, ctx.tz), ctx, draft)
    if not draft.lines:
        return None
    line = draft.lines[0]
    return Quote(
        amount=line.amount, currency=line.currency, description=line.description, share=line.share
    )


def month_end_status(month: dt.date) -> dict[str, Any]:
    """How far the month's statements are: drafts, finals, problems, totals."""
    statements = list(queries.statements_of_month(month, include_drafts=True))
    totals: dict[str, Decimal] = {}
    for s in statements:
        if s.currency:
            totals[s.currency] = totals.get(s.currency, Decimal("0.00")) + s.total
    return {
        "month": month,
        "drafts": sum(1 for s in statements if s.state == StatementState.DRAFT),
        "finals": sum(1 for s in statements if s.state == StatementState.FINAL),
        "problems": [s for s in statements if s.problems][:5],
        "totals": sorted(totals.items()),
    }
