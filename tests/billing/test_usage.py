"""Usage reports, their CSV and charts. Figures worked by hand in the comments.

March 2027 in Vienna has 23 weekdays; with Easter Monday (29 March) recorded as a holiday the
SEM has 22 × 10 h = 220 bookable hours (calendar arithmetic; Easter from dateutil.easter).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import xml.etree.ElementTree as ET
from decimal import Decimal

import pytest

from facility.billing import charts, exports, services, usage
from facility.bookings.models import BookingState
from tests.billing.helpers import MARCH, at, log_booking, log_session

pytestmark = pytest.mark.django_db
SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture
def march(facility):
    fac = facility
    services.add_holiday(day=dt.date(2027, 3, 29), name="Easter Monday", by=fac.manager)
    # A: booked 2 h and used 2 h 30 (overran); B: booked 3 h, used 1 h; client: no-show 2 h;
    # A: late cancellation 1 h; staff: 4 h service booking + its 4 h service session.
    b1 = log_booking(fac, at(2, 9), at(2, 11))
    log_session(fac, at(2, 9), at(2, 11, 30), booking=b1)
    b2 = log_booking(fac, at(3, 9), at(3, 12), user=fac.researcher_b, account=fac.account_b)
    log_session(fac, at(3, 9), at(3, 10), booking=b2, user=fac.researcher_b, account=fac.account_b)
    log_booking(
        fac,
        at(4, 9),
        at(4, 11),
        state=BookingState.NO_SHOW,
        user=fac.client,
        account=fac.client_account,
    )
    log_booking(fac, at(5, 9), at(5, 10), state=BookingState.LATE_CANCELLED)
    log_booking(fac, at(8, 8), at(8, 12), purpose="service", user=fac.manager)
    log_session(fac, at(8, 8), at(8, 12), purpose="service", user=fac.manager)
    # April use must not count in March.
    log_session(fac, at(1, 9, month=4), at(1, 10, month=4))
    return fac


def test_instrument_usage_for_the_month(march):
    row = next(r for r in usage.instrument_usage(MARCH) if r.instrument == "fe-sem")
    # booked: 2 + 3 + 2 (no-show) + 1 (late) = 8 h; service bookings are downtime, not booked.
    assert row.booked_hours == Decimal("8.00")
    # used: 2.5 + 1 = 3.5 h (the service session is not use).
    assert row.used_hours == Decimal("3.50")
    assert (row.no_show_hours, row.late_cancelled_hours) == (Decimal("2.00"), Decimal("1.00"))
    assert row.downtime_hours == Decimal("4.00")
    assert row.bookable_hours == Decimal("220.00")
    # utilisation 3.5 / 220 = 0.0159… → 0.016
    assert row.utilisation == Decimal("0.016")
    assert (row.sessions, row.bookings) == (2, 4)
    assert row.as_dict()["used_hours"] == "3.50"


def test_breakdowns(march):
    by_group = {r.key: r for r in usage.usage_breakdown(MARCH, "group")}
    assert by_group["Kestrel surface lab"].used_hours == Decimal("2.50")
    assert by_group["Kestrel surface lab"].booked_hours == Decimal("3.00")  # 2 + 1 late
    assert by_group["Larchmoor polymer group"].booked_hours == Decimal("3.00")
    assert by_group["Quillfen Coatings (client)"].booked_hours == Decimal("2.00")
    by_category = {r.key: r for r in usage.usage_breakdown(MARCH, "rate_category")}
    assert by_category["commercial"].booked_hours == Decimal("2.00")
    assert by_category["internal"].used_hours == Decimal("3.50")
    by_purpose = {r.key: r for r in usage.usage_breakdown(MARCH, "purpose")}
    assert by_purpose["service"].used_hours == Decimal("4.00")
    assert by_purpose["service"].label == "Service / maintenance"
    with pytest.raises(ValueError):
        usage.usage_breakdown(MARCH, "colour")


def test_top_users(march):
    top = usage.top_users(MARCH)
    assert [(u.username, u.used_hours) for u in top] == [
        ("ada.researcher", Decimal("2.50")),
        ("ben.researcher", Decimal("1.00")),
    ]


def test_usage_runs_in_a_fixed_number_of_queries(march, django_assert_max_num_queries):
    with django_assert_max_num_queries(4):  # bookings, sessions, holidays, instruments
        usage.instrument_usage(MARCH)


def test_usage_csv(march):
    rows = list(csv.DictReader(io.StringIO(exports.usage_csv(MARCH))))
    sem = next(r for r in rows if r["instrument"] == "fe-sem")
    assert (sem["month"], sem["used_hours"], sem["utilisation"]) == ("2027-03", "3.50", "0.016")
    groups = list(csv.DictReader(io.StringIO(exports.breakdown_csv(MARCH, "group"))))
    assert {r["key"] for r in groups} >= {"Kestrel surface lab", "Larchmoor polymer group"}
    top = list(csv.DictReader(io.StringIO(exports.top_users_csv(MARCH))))
    assert top[0] == {
        "month": "2027-03",
        "rank": "1",
        "user": "ada.researcher",
        "used_hours": "2.50",
        "sessions": "1",
    }


def test_monthly_hours_and_utilisation_series(march):
    rows = usage.monthly_hours(MARCH, dt.date(2027, 4, 1))
    assert [(r.month, r.used_hours) for r in rows] == [
        (MARCH, Decimal("3.50")),
        (dt.date(2027, 4, 1), Decimal("1.00")),
    ]
    points = usage.utilisation_series(MARCH, dt.date(2027, 4, 1))
    assert points[0].utilisation == Decimal("0.016")
    # April 2027: 22 weekdays × 10 h = 220 h; 1 h used → 0.005 (0.004545… half up).
    assert points[1].bookable_hours == Decimal("220.00")
    assert points[1].utilisation == Decimal("0.005")


def test_charts_are_svg_with_one_bar_per_instrument_and_month(march):
    svg = charts.monthly_hours_chart(usage.monthly_hours(MARCH, dt.date(2027, 4, 1)))
    root = ET.fromstring(svg)  # well-formed XML (W3C SVG 1.1)
    assert root.tag == f"{SVG}svg"
    bars = [g.get("id") for g in root.iter(f"{SVG}g") if (g.get("id") or "").startswith("bar-")]
    assert bars == ["bar-fe-sem-2027-03", "bar-fe-sem-2027-04"]
    line = charts.utilisation_chart(usage.utilisation_series(MARCH, dt.date(2027, 4, 1)))
    assert ET.fromstring(line).find(f".//{SVG}g[@id='utilisation-fe-sem']") is not None
    # The same data draws the same SVG (fixed id salt, no date in the metadata).
    assert svg == charts.monthly_hours_chart(usage.monthly_hours(MARCH, dt.date(2027, 4, 1)))
