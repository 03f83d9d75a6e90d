"""Billing test helpers: local moments in Vienna, tariffs and logbook entries made to measure.

The SEM's normal hours are 08:00–18:00, Monday to Friday (tests/factories.py). March 2027
starts on a Monday; Easter Sunday 2027 is 28 March, also the night the clocks go forward.
"""

from __future__ import annotations

import datetime as dt
import zoneinfo
from decimal import Decimal

from facility.billing import services
from facility.bookings.models import BookingState, Purpose
from facility.people.models import RateCategory
from tests import factories as f

TZ = zoneinfo.ZoneInfo("Europe/Vienna")
MARCH = dt.date(2027, 3, 1)


def at(day: int, hour: int, minute: int = 0, *, month: int = 3, year: int = 2027) -> dt.datetime:
    """A local wall-clock moment in Vienna."""
    return dt.datetime(year, month, day, hour, minute, tzinfo=TZ)


def add_tariff(fac, **terms):
    values = {
        "instrument": fac.sem,
        "rate_category": RateCategory.INTERNAL,
        "purpose": Purpose.OWN_USE,
        "hourly_rate": Decimal("80.00"),
        "valid_from": dt.date(2027, 1, 1),
        "by": fac.manager,
    }
    values.update(terms)
    return services.add_tariff(**values)


def log_session(fac, start, end, *, user=None, account=None, purpose=Purpose.OWN_USE, **extra):
    """A checked-out logbook entry (written directly: billing only reads the logbook)."""
    return f.InstrumentSessionFactory(
        instrument=extra.pop("instrument", fac.sem),
        operator=user or fac.researcher_a,
        account=account or fac.account_a,
        purpose=purpose,
        started_at=start,
        ended_at=end,
        **extra,
    )


def log_booking(fac, start, end, *, state=BookingState.DONE, user=None, account=None, **extra):
    return f.BookingFactory(
        instrument=extra.pop("instrument", fac.sem),
        user=user or fac.researcher_a,
        account=account or fac.account_a,
        starts_at=start,
        ends_at=end,
        state=state,
        cancelled_at=extra.pop(
            "cancelled_at", start - dt.timedelta(hours=2) if "cancelled" in state else None
        ),
        **extra,
    )


def draft(fac, account=None, month=MARCH):
    return services.draft_statement(account=account or fac.account_a, month=month, by=fac.manager)


def amounts(statement) -> list[Decimal]:
    return list(statement.lines.order_by("position").values_list("amount", flat=True))
