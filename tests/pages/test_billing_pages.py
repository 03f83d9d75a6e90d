"""Billing pages: the month's statements by role, one statement with its exports, finalising with
a confirmation step, adjustments, the usage report, the month-end status on the staff overview
and the cost of a late cancellation on the cancel page.

February 2030 (the month before the frozen clock) holds three sessions on the SEM, priced at a
tariff of 40.00 EUR an hour in 15-minute steps, so every amount can be worked out by hand.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
import xml.etree.ElementTree as ET
from decimal import Decimal

import pytest
from django.urls import reverse

from facility.billing import services
from facility.billing.models import Statement, StatementState
from facility.people.models import Role
from tests import factories as f
from tests.pages.conftest import NOW, ZONE

pytestmark = pytest.mark.django_db

FEBRUARY = dt.date(2030, 2, 1)


def _feb(day: int, hour: int, minute: int = 0) -> dt.datetime:
    return dt.datetime(2030, 2, day, hour, minute, tzinfo=ZONE)


def _session(facility, start: dt.datetime, hours: float, user, account):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=user,
        account=account,
        started_at=start,
        ended_at=start + dt.timedelta(hours=hours),
        beam_on_hours=hours,
    )


@pytest.fixture
def billed(facility, frozen):
    """Tariff and three February sessions (weekdays, inside 08:00–18:00, so no out-of-hours
    factor): Kestrel 2 h + 1.5 h, Larchmoor 1 h. Then the month's drafts, as the beat job does."""
    services.add_tariff(
        instrument=facility.sem,
        rate_category="internal",
        purpose="own_use",
        hourly_rate="40.00",
        valid_from=dt.date(2020, 1, 1),
        by=facility.manager,
        late_cancellation_share="0.500",
    )
    _session(facility, _feb(4, 9), 2, facility.researcher_a, facility.account_a)
    _session(facility, _feb(5, 9), 1.5, facility.researcher_a, facility.account_a)
    _session(facility, _feb(6, 14), 1, facility.researcher_b, facility.account_b)
    services.draft_month(month=FEBRUARY, by=facility.manager)
    return {
        "a": Statement.objects.get(account=facility.account_a),
        "b": Statement.objects.get(account=facility.account_b),
    }


@pytest.fixture
def finance(facility):
    return f.UserFactory(username="fin.officer", profile__role=Role.FINANCE)


def _text(response) -> str:
    return re.sub(r"\s+", " ", response.content.decode())


LIST = reverse("statement-list") + "?month=2030-02"


def test_statement_list_by_role(as_user, facility, billed, finance):
    for persona in ("researcher_a", "researcher_b", "client"):
        assert as_user(getattr(facility, persona)).get(LIST).status_code == 403, persona
    leader = _text(as_user(facility.leader_a).get(LIST))
    assert "KES-01" in leader and "LAR-01" not in leader  # only the groups one leads
    for reader in (facility.manager, finance):
        body = _text(as_user(reader).get(LIST))
        # 2 h + 1.5 h at 40.00 = 140.00; 1 h = 40.00; together 180.00 (hand-computed).
        assert "KES-01" in body and "LAR-01" in body
        assert "140.00 EUR" in body and "180.00 EUR" in body


def test_the_statements_link_is_for_those_who_read_statements(as_user, facility, billed, finance):
    link = f'href="{reverse("statement-list")}"'
    for person, shown in [
        (facility.researcher_a, False),
        (facility.leader_a, True),
        (finance, True),
        (facility.manager, True),
    ]:
        assert (link in as_user(person).get(reverse("home")).content.decode()) is shown


def test_statement_detail_is_scoped(as_user, facility, billed):
    a, b = billed["a"], billed["b"]
    leader = as_user(facility.leader_a)
    assert leader.get(reverse("statement-detail", args=[a.pk])).status_code == 200
    for name in ("statement-detail", "statement-csv", "statement-pdf"):
        assert leader.get(reverse(name, args=[b.pk])).status_code == 404, name
        assert as_user(facility.researcher_a).get(reverse(name, args=[a.pk])).status_code == 404


def test_statement_exports(as_user, facility, billed):
    client = as_user(facility.leader_a)
    pk = billed["a"].pk
    response = client.get(reverse("statement-csv", args=[pk]))
    assert response["Content-Disposition"].startswith("attachment;")
    rows = list(csv.DictReader(io.StringIO(response.content.decode())))  # RFC 4180 via csv
    assert [r["amount"] for r in rows] == ["80.00", "60.00"]  # 2 h and 1.5 h at 40.00
    assert sum(Decimal(r["amount"]) for r in rows) == Decimal("140.00")
    pdf = client.get(reverse("statement-pdf", args=[pk]))
    assert pdf["Content-Type"] == "application/pdf"
    assert pdf.content.startswith(b"%PDF-")  # ISO 32000-1, 7.5.2 file header


def test_finalise_with_confirmation(as_user, facility, billed):
    statement = billed["a"]
    staff = as_user(facility.manager)
    url = reverse("statement-finalise", args=[statement.pk])
    page = _text(staff.get(url))
    assert "Finalising cannot be undone." in page and "140.00 EUR" in page
    checksum = re.search(r'name="expected_checksum" value="([0-9a-f]{64})"', page).group(1)
    statement.refresh_from_db()
    assert statement.state == StatementState.DRAFT  # looking changes nothing
    response = staff.post(url, {"expected_checksum": checksum})
    assert response["Location"] == reverse("statement-detail", args=[statement.pk])
    statement.refresh_from_db()
    assert statement.state == StatementState.FINAL and statement.reference == "S-000001"
    detail = _text(staff.get(response["Location"]))
    assert "Statement S-000001 finalised: 140.00 EUR for KES-01, February 2030." in detail
    assert "The lines match the checksum sealed with it." in detail


def test_finalising_is_for_staff(as_user, facility, billed, finance):
    statement = billed["a"]
    url = reverse("statement-finalise", args=[statement.pk])
    for person in (facility.leader_a, finance):
        assert as_user(person).get(url).status_code == 403
        assert as_user(person).post(url, {"expected_checksum": "0" * 64}).status_code == 403
    statement.refresh_from_db()
    assert statement.state == StatementState.DRAFT


def test_finalising_a_changed_draft_is_refused(as_user, facility, billed):
    statement = billed["a"]
    staff = as_user(facility.manager)
    url = reverse("statement-finalise", args=[statement.pk])
    checksum = re.search(r'value="([0-9a-f]{64})"', staff.get(url).content.decode()).group(1)
    # A late logbook entry for February arrives after the reviewer looked.
    _session(facility, _feb(7, 9), 1, facility.researcher_a, facility.account_a)
    response = staff.post(url, {"expected_checksum": checksum})
    assert response.status_code == 409
    assert "changed since it was reviewed" in _text(response)
    statement.refresh_from_db()
    assert statement.state == StatementState.DRAFT and statement.number is None


def test_a_month_not_over_cannot_be_finalised(as_user, facility, billed):
    _session(facility, NOW - dt.timedelta(days=2), 1, facility.researcher_a, facility.account_a)
    services.draft_month(month=dt.date(2030, 3, 1), by=facility.manager)
    march = Statement.objects.get(month=dt.date(2030, 3, 1))
    staff = as_user(facility.manager)
    url = reverse("statement-finalise", args=[march.pk])
    assert "March 2030 is not over yet" in _text(staff.get(url))
    response = staff.post(url, {"expected_checksum": "0" * 64})
    assert response.status_code == 409
    march.refresh_from_db()
    assert march.state == StatementState.DRAFT


def test_draft_the_month_from_the_page(
    as_user, facility, frozen, finance, django_capture_on_commit_callbacks
):
    _session(facility, _feb(4, 9), 2, facility.researcher_a, facility.account_a)
    url = reverse("statement-draft-month")
    assert as_user(finance).post(url, {"month": "2030-02"}).status_code == 403
    assert not Statement.objects.exists()
    with django_capture_on_commit_callbacks(execute=True):
        response = as_user(facility.manager).post(url, {"month": "2030-02"})
    assert response["Location"] == LIST
    assert Statement.objects.get().account == facility.account_a


def test_month_export_for_staff_and_finance(as_user, facility, billed, finance):
    url = reverse("statement-month-export") + "?month=2030-02&drafts=1"
    assert as_user(facility.leader_a).get(url).status_code == 403
    rows = list(csv.DictReader(io.StringIO(as_user(finance).get(url).content.decode())))
    assert sorted(r["amount"] for r in rows) == ["40.00", "60.00", "80.00"]
    finals_only = as_user(finance).get(reverse("statement-month-export") + "?month=2030-02")
    assert len(list(csv.DictReader(io.StringIO(finals_only.content.decode())))) == 0


def test_adjustments_on_a_draft(as_user, facility, billed):
    statement = billed["a"]
    staff = as_user(facility.manager)
    add = reverse("statement-adjustment-add", args=[statement.pk])
    refused = staff.post(add, {"adj-amount": "abc", "adj-reason": "goodwill"})
    assert refused.status_code == 400 and "is not a number" in _text(refused)
    assert (
        as_user(facility.leader_a)
        .post(add, {"adj-amount": "-20.00", "adj-reason": "x"})
        .status_code
        == 403
    )
    staff.post(add, {"adj-amount": "-20.00", "adj-reason": "goodwill credit"})
    statement.refresh_from_db()
    assert statement.total == Decimal("120.00")  # 140.00 − 20.00
    line = statement.lines.get(kind="adjustment")
    staff.post(reverse("statement-adjustment-remove", args=[statement.pk, line.pk]))
    statement.refresh_from_db()
    assert statement.total == Decimal("140.00")


def test_usage_report_for_staff_and_finance(as_user, facility, billed, finance):
    url = reverse("usage-report") + "?month=2030-02"
    assert as_user(facility.leader_a).get(url).status_code == 403
    body = _text(as_user(finance).get(url))
    # Used: 2 + 1.5 + 1 = 4.5 h in three sessions (hand count).
    assert re.search(r"Field-emission SEM</th><td>[\d.]+</td><td>4\.50</td>", body)
    staff = as_user(facility.manager)
    for kind in ("hours", "utilisation"):
        svg = staff.get(reverse("usage-chart", args=[kind]) + "?month=2030-02")
        root = ET.fromstring(svg.content)  # well-formed SVG (W3C SVG 1.1 namespace)
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
    for what in ("instruments", "group", "top-users"):
        response = staff.get(reverse("usage-export", args=[what]) + "?month=2030-02")
        assert response.status_code == 200 and response["Content-Type"].startswith("text/csv")
    assert staff.get(reverse("usage-export", args=["nonsense"])).status_code == 404


def test_month_end_status_on_the_staff_home(as_user, facility, billed):
    staff = as_user(facility.manager)
    home = _text(staff.get(reverse("home")))
    assert "February 2030</strong></a>: 0 final, 2 draft statements; 180.00 EUR." in home
    statement = billed["a"]
    services.finalise_statement(statement=statement, by=facility.manager)
    assert "1 final, 1 draft statement; 180.00 EUR." in _text(staff.get(reverse("home")))


def test_cancel_page_states_the_cost_of_a_late_cancellation(as_user, facility, billed):
    tomorrow = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=NOW + dt.timedelta(hours=23),  # inside the 24 h of the deadline
        ends_at=NOW + dt.timedelta(hours=25),
    )
    later = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=NOW + dt.timedelta(days=7),
        ends_at=NOW + dt.timedelta(days=7, hours=1),
    )
    client = as_user(facility.researcher_a)
    late = _text(client.get(reverse("booking-cancel", args=[tomorrow.pk])))
    # Half of 2 h at 40.00 an hour: 40.00 (hand-computed from the tariff above).
    assert "Cancelling now costs <strong>40.00 EUR</strong>" in late
    early = _text(client.get(reverse("booking-cancel", args=[later.pk])))
    # Free now; later, half of 1 h at 40.00: 20.00.
    assert "Cancelling now is free" in early
    assert "a late cancellation would cost <strong>20.00 EUR</strong>" in early
