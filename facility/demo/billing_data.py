"""Demo tariffs (invented rates) and the statements of the demo's past months.

Rates per hour by instrument and rate category; assisted and training time adds staff time.
Statements of finished months are drafted through the billing services, so the billing pages
show drafts and month-end status at once.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

from django.utils import timezone

from facility.billing import services as billing
from facility.billing.models import ChargeBasis, Statement
from facility.billing.months import first_of, previous_month
from facility.bookings.models import Purpose
from facility.instruments.models import Instrument, InstrumentKind
from facility.people.models import RateCategory

# Invented hourly rates (EUR) by instrument kind and rate category.
RATES = {
    InstrumentKind.SEM: {"internal": "62.00", "external_academic": "95.00", "commercial": "210.00"},
    InstrumentKind.ESEM: {
        "internal": "55.00",
        "external_academic": "85.00",
        "commercial": "190.00",
    },
    InstrumentKind.COATER: {
        "internal": "12.00",
        "external_academic": "18.00",
        "commercial": "40.00",
    },
}
STAFF_RATE = "48.00"


def add_tariffs(*, by, valid_from: dt.date) -> int:
    made = 0
    for instrument in Instrument.objects.order_by("code"):
        rates = RATES.get(instrument.kind)
        if not rates:
            continue
        for category in RateCategory.values:
            for purpose in (Purpose.OWN_USE, Purpose.ASSISTED, Purpose.TRAINING):
                billing.add_tariff(
                    instrument=instrument,
                    rate_category=category,
                    purpose=purpose,
                    hourly_rate=Decimal(rates[category]),
                    valid_from=valid_from,
                    by=by,
                    increment_minutes=15,
                    minimum_charge="15.00" if instrument.kind != InstrumentKind.COATER else "0.00",
                    out_of_hours_factor="1.250",
                    staff_hourly_rate=STAFF_RATE if purpose != Purpose.OWN_USE else "0.00",
                    charge_basis=ChargeBasis.USED,
                    late_cancellation_share="0.500",
                    no_show_share="1.000",
                    note="Demo tariff (invented rates).",
                )
                made += 1
    return made


def draft_past_months(*, by, first_day: dt.date, now: dt.datetime | None = None) -> dict[str, int]:
    """Draft every finished month from `first_day`.

    None is finalised: a final statement is immutable (on PostgreSQL a trigger refuses to delete
    its lines), so finalising would make the demo impossible to reset. Finalise one from the
    statements page to see the whole flow.
    """
    now = now or timezone.now()
    month = first_of(first_day)
    last = previous_month(first_of(timezone.localdate(now)))
    drafted = 0
    while month <= last:
        billing.draft_month(month=month, by=by, now=now)
        drafted += Statement.objects.filter(month=month).count()
        month = first_of(month + dt.timedelta(days=32))
    return {"drafted": drafted}
