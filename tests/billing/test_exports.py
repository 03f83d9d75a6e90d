"""CSV (RFC 4180, read back with Python's csv module), the PDF statement and JSON-ready data."""

from __future__ import annotations

import csv
import io
import json
from decimal import Decimal

import pytest

from facility.billing import exports, services
from facility.billing.models import Statement
from facility.billing.pdf import statement_pdf
from tests import factories as f
from tests.billing.helpers import MARCH, add_tariff, at, draft, log_booking, log_session

pytestmark = pytest.mark.django_db

DOCUMENTED = [
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
]


@pytest.fixture
def final(facility, clock):
    add_tariff(facility, out_of_hours_factor="1.5", no_show_share="0.5")
    log_session(facility, at(2, 17), at(2, 19, 30))  # 260.00
    log_booking(facility, at(4, 9), at(4, 11), state="no_show")  # 80.00
    log_session(facility, at(28, 1), at(28, 4))  # DST night, 240.00
    return services.finalise_statement(statement=draft(facility), by=facility.manager)


def _read(text):
    return list(csv.DictReader(io.StringIO(text)))


def test_statement_csv_has_the_documented_columns(final):
    text = exports.statement_csv(final)
    header = next(csv.reader(io.StringIO(text)))
    assert header[: len(DOCUMENTED)] == DOCUMENTED
    rows = _read(text)
    assert [r["amount"] for r in rows] == ["260.00", "80.00", "240.00"]
    first = rows[0]
    assert first["statement_number"] == "S-000001"
    assert first["account_code"] == "KES-01"
    assert first["group"] == "Kestrel surface lab"
    assert first["user"] == "ada.researcher"
    assert first["instrument"] == "fe-sem"
    assert (first["date"], first["start"], first["end"]) == (
        "2027-03-02",
        "2027-03-02T17:00+01:00",
        "2027-03-02T19:30+01:00",
    )
    assert (first["hours"], first["purpose"], first["rate"], first["currency"]) == (
        "2.50",
        "own_use",
        "80.00",
        "EUR",
    )
    # The DST night keeps its offsets: 01:00 CET to 04:00 CEST (IANA tz database).
    assert (rows[2]["start"], rows[2]["end"]) == (
        "2027-03-28T01:00+01:00",
        "2027-03-28T04:00+02:00",
    )
    assert sum(Decimal(r["amount"]) for r in rows) == final.total == Decimal("580.00")


def test_month_csv_holds_final_statements_only_unless_asked(final, facility):
    log_session(
        facility, at(5, 9), at(5, 10), user=facility.researcher_b, account=facility.account_b
    )
    draft(facility, account=facility.account_b)
    finals = _read(exports.month_csv(MARCH))
    assert {r["account_code"] for r in finals} == {"KES-01"}
    everything = _read(exports.month_csv(MARCH, include_drafts=True))
    assert {r["account_code"] for r in everything} == {"KES-01", "LAR-01"}
    assert [r["statement_number"] for r in everything if r["account_code"] == "LAR-01"] == [""]


def test_formula_like_text_is_neutralised(facility):
    # OWASP "CSV Injection": a cell starting with = + - @ must not run as a formula.
    add_tariff(facility)
    group = f.GroupFactory(name='=HYPERLINK("http://example.org")')
    account = f.AccountFactory(code="+EVIL", group=group)
    log_session(facility, at(2, 9), at(2, 10), account=account)
    statement = draft(facility, account=account)
    services.add_adjustment(
        account=account, amount="-5.00", reason="@credit", by=facility.manager, month=MARCH
    )
    rows = _read(exports.statement_csv(statement))
    assert rows[0]["group"].startswith("'=")
    assert rows[0]["account_code"] == "'+EVIL"
    assert rows[1]["description"] == "Adjustment: @credit"
    assert rows[1]["amount"] == "-5.00"  # a number keeps its sign


def test_statement_data_is_json_with_money_as_strings(final):
    data = exports.statement_data(final)
    encoded = json.dumps(data)  # no Decimal or float reaches JSON
    assert '"total": "580.00"' in encoded
    assert all(isinstance(line["amount"], str) for line in data["lines"])
    assert data["number"] == "S-000001" and data["checksum"] == final.checksum


def test_pdf_carries_the_header_lines_and_checksum(final, settings):
    settings.FACILITY_NAME = "Northfield Microscopy Core"
    settings.BILLING_HEADER_LINES = ["1 Lens Lane, Northfield", "VAT ATU00000000"]
    pdf = statement_pdf(final, compress=False)
    assert pdf.startswith(b"%PDF-") and pdf.rstrip().endswith(b"%%EOF")  # ISO 32000 file frame
    for text in (b"Northfield Microscopy Core", b"1 Lens Lane, Northfield", b"S-000001"):
        assert text in pdf
    assert final.checksum.encode() in pdf
    assert statement_pdf(final) == statement_pdf(final)  # invariant: same statement, same bytes


def test_draft_pdf_says_it_is_not_a_bill(facility):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    pdf = statement_pdf(draft(facility), compress=False)
    assert b"DRAFT statement" in pdf
    assert Statement.objects.get().state == "draft"


def test_statement_export_query_count_does_not_grow_with_lines(
    final, facility, django_assert_num_queries
):
    # One query for the statement (with account and group), one for its lines with their
    # instruments and users: N lines never cost N queries.
    with django_assert_num_queries(2):
        exports.statement_csv(final)
    with django_assert_num_queries(2):
        exports.statement_data(final)
