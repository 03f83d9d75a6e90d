"""Billing through the API: month-end drafting and finalising, scoping of statements and lines,
the exports, adjustments — and every write path on a final statement refused (409, `closed`).

The month: February 2031 (NOW is 4 March 2031, so it is over). Group A used the SEM 10:00–12:00
on Monday 10 February, group B the second SEM 09:00–10:30 on Tuesday 11 February; both at the
internal own-use rate of 80.00 EUR an hour, inside normal hours (08:00–18:00), so 2 h × 80.00 =
160.00 and 1.5 h × 80.00 = 120.00 (by hand).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from decimal import Decimal

import pytest

from facility.billing import exports, services
from facility.billing.models import Charge, Statement
from facility.bookings.models import Purpose
from facility.people.models import RateCategory
from tests import factories as f
from tests.api.conftest import World

FEB = dt.date(2031, 2, 1)
S = "/api/v1/billing/statements/"


def _bill_february(world: World) -> None:
    fa = world.facility
    for side, day, start, hours in ((world.a, 10, 10, 2), (world.b, 11, 9, 1.5)):
        services.add_tariff(
            instrument=side.instrument,
            rate_category=RateCategory.INTERNAL,
            purpose=Purpose.OWN_USE,
            hourly_rate=Decimal("80.00"),
            valid_from=dt.date(2031, 1, 1),
            by=fa.manager,
        )
        begin = dt.datetime(2031, 2, day, start, tzinfo=dt.UTC)
        f.InstrumentSessionFactory(
            instrument=side.instrument,
            operator=side.user,
            account=side.account,
            started_at=begin,
            ended_at=begin + dt.timedelta(hours=hours),
        )


@pytest.fixture
def february(world):
    _bill_february(world)
    run = world.client_for("staff").post(f"{S}draft-month/", {"month": "2031-02"}, format="json")
    assert run.status_code == 200, run.json()
    return run.json()


def _statement(world: World, side) -> Statement:
    return Statement.objects.get(account=side.account, month=FEB)


def test_drafting_a_month(world, february):
    assert february["month"] == "2031-02" and february["statements"] == 2
    # 160.00 + 120.00, as a string.
    assert february["totals"] == {"EUR": "280.00"}
    a = world.client_for("staff").get(f"{S}{_statement(world, world.a).pk}/").json()
    assert (a["state"], a["total"], a["currency"], a["month"]) == (
        "draft",
        "160.00",
        "EUR",
        "2031-02",
    )


def test_statements_are_scoped(world, february):
    a, b = _statement(world, world.a), _statement(world, world.b)
    seen = {
        role: [s["id"] for s in world.client_for(role).get(S).json()["results"]]
        for role in ("researcher_a", "researcher_b", "leader_a", "client", "staff")
    }
    # Staff all; group A's leader A's; researchers and the client none (they are no leaders).
    assert seen == {
        "researcher_a": [],
        "researcher_b": [],
        "leader_a": [a.pk],
        "client": [],
        "staff": sorted([a.pk, b.pk], reverse=True),
    }
    leader = world.client_for("leader_a")
    assert leader.get(f"{S}{b.pk}/").status_code == 404
    assert leader.get(f"{S}{b.pk}/lines/").status_code == 404
    assert leader.get(f"{S}{b.pk}/csv/").status_code == 404
    lines = leader.get(f"{S}{a.pk}/lines/").json()
    assert [(x["kind"], x["user"], x["amount"], x["billed_minutes"]) for x in lines] == [
        ("use", "ada.researcher", "160.00", 120)
    ]


def test_my_costs(world, february):
    mine = world.client_for("researcher_a").get("/api/v1/billing/lines/").json()["results"]
    assert [(x["user"], x["amount"], x["hourly_rate"]) for x in mine] == [
        ("ada.researcher", "160.00", "80.00")
    ]
    theirs = world.client_for("researcher_b").get("/api/v1/billing/lines/").json()["results"]
    assert [x["amount"] for x in theirs] == ["120.00"]


def test_exports(world, february):
    a = _statement(world, world.a)
    api = world.client_for("leader_a")
    response = api.get(f"{S}{a.pk}/csv/")
    assert response.status_code == 200 and response["Content-Type"].startswith("text/csv")
    # Parsed as RFC 4180 by the standard library's csv module.
    rows = list(csv.reader(io.StringIO(response.content.decode())))
    assert tuple(rows[0]) == exports.STATEMENT_COLUMNS
    row = dict(zip(rows[0], rows[1], strict=True))
    assert (row["account_code"], row["hours"], row["amount"]) == ("KES-01", "2.00", "160.00")
    pdf = api.get(f"{S}{a.pk}/pdf/")
    # A PDF file begins with its header "%PDF-" (ISO 32000-1 §7.5.2).
    assert pdf.status_code == 200 and pdf.content[:5] == b"%PDF-"
    assert pdf["Content-Type"] == "application/pdf"


def test_finalising(world, february):
    a = _statement(world, world.a)
    leader = world.client_for("leader_a")
    refused = leader.post(f"{S}{a.pk}/finalise/", {}, format="json")
    assert refused.status_code == 403 and refused.json()["error"]["code"] == "not_allowed"
    staff = world.client_for("staff")
    stale = staff.post(f"{S}{a.pk}/finalise/", {"expected_checksum": "0" * 64}, format="json")
    assert stale.status_code == 409 and stale.json()["error"]["code"] == "conflict"
    done = staff.post(f"{S}{a.pk}/finalise/", {}, format="json")
    assert done.status_code == 200, done.json()
    body = done.json()
    assert body["state"] == "final" and body["reference"] == "S-000001"
    assert len(body["checksum"]) == 64 and body["finalised_by"] == "mara.manager"


def _closed(response) -> None:
    assert response.status_code == 409, response.json()
    error = response.json()["error"]
    assert error["code"] == "closed" and "final" in error["message"]


def test_every_write_on_a_final_statement_is_refused(world, february):
    staff = world.client_for("staff")
    a = _statement(world, world.a)
    credit = staff.post(
        "/api/v1/billing/adjustments/",
        {"account": "KES-01", "amount": "-10.00", "reason": "goodwill", "month": "2031-02"},
        format="json",
    )
    assert credit.status_code == 201, credit.json()
    assert staff.post(f"{S}{a.pk}/finalise/", {}, format="json").status_code == 200
    before = list(Charge.objects.filter(statement=a).values_list("id", "amount"))
    history = a.history.count()

    # Finalising again.
    _closed(staff.post(f"{S}{a.pk}/finalise/", {}, format="json"))
    # An adjustment on its month.
    _closed(
        staff.post(
            "/api/v1/billing/adjustments/",
            {"account": "KES-01", "amount": "5.00", "reason": "late fee", "month": "2031-02"},
            format="json",
        )
    )
    # Taking its adjustment off.
    _closed(staff.delete(f"/api/v1/billing/adjustments/{credit.json()['id']}/"))
    # Drafting the month again leaves it alone (the other account's draft is rebuilt).
    again = staff.post(f"{S}draft-month/", {"month": "2031-02"}, format="json").json()
    assert again["skipped_final"] == ["KES-01"]

    a.refresh_from_db()
    assert (a.state, a.total) == ("final", Decimal("150.00"))
    assert list(Charge.objects.filter(statement=a).values_list("id", "amount")) == before
    assert a.history.count() == history


def test_a_correction_goes_on_the_next_month(world, february):
    staff = world.client_for("staff")
    a = _statement(world, world.a)
    staff.post(f"{S}{a.pk}/finalise/", {}, format="json")
    fix = staff.post(
        "/api/v1/billing/adjustments/",
        {"account": "KES-01", "amount": "-20.00", "reason": "stage fault", "corrects": a.pk},
        format="json",
    )
    assert fix.status_code == 201, fix.json()
    line = Charge.objects.get(pk=fix.json()["id"])
    assert line.statement.month == dt.date(2031, 3, 1) and fix.json()["corrects"] == a.pk
    assert fix.json()["amount"] == "-20.00"


@pytest.mark.parametrize("amount", [-30, "-30.001", "thirty", "1e3"])
def test_money_goes_in_as_a_decimal_string(world, amount):
    response = world.client_for("staff").post(
        "/api/v1/billing/adjustments/",
        {"account": "KES-01", "amount": amount, "reason": "x", "month": "2031-03"},
        format="json",
    )
    assert response.status_code == 400
    assert "amount" in response.json()["error"]["fields"]
    assert not Charge.objects.exists()


def test_usage_report(world, february):
    staff = world.client_for("staff")
    body = staff.get("/api/v1/billing/usage/2031-02/").json()
    assert body["month"] == "2031-02"
    sem = next(row for row in body["instruments"] if row["instrument"] == "fe-sem")
    assert (sem["used_hours"], sem["sessions"]) == ("2.00", 1)
    response = staff.get("/api/v1/billing/usage/2031-02/csv/")
    rows = list(csv.DictReader(io.StringIO(response.content.decode())))
    assert tuple(rows[0]) == exports.USAGE_COLUMNS
    assert {r["instrument"]: r["used_hours"] for r in rows}["vp-sem"] == "1.50"
    assert world.client_for("leader_a").get("/api/v1/billing/usage/2031-02/").status_code == 403
    bad = staff.get("/api/v1/billing/usage/2031-13/")
    assert bad.status_code == 400 and "month" in bad.json()["error"]["fields"]


@pytest.mark.parametrize("month", ["9999-12", "0000-01", "2031-13", "31-02", "2031-2"])
def test_months_out_of_range_are_400(world, month):
    staff = world.client_for("staff")
    drafted = staff.post(f"{S}draft-month/", {"month": month}, format="json")
    assert drafted.status_code == 400 and "month" in drafted.json()["error"]["fields"]
    listed = staff.get(S, {"month": month})
    assert listed.status_code == 400 and "month" in listed.json()["error"]["fields"]
