"""The billing management commands: output, refusals as one stderr line, exit status."""

from __future__ import annotations

import io
import os
import subprocess
import sys
from pathlib import Path

import pytest
from django.core.management import CommandError, call_command

from facility.billing.models import Holiday, Statement, StatementState
from tests.billing.helpers import add_tariff, at, log_session

pytestmark = pytest.mark.django_db
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def logged(facility):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 11))
    log_session(
        facility, at(3, 9), at(3, 10), user=facility.researcher_b, account=facility.account_b
    )
    return facility


def test_draft_statements_for_a_month(logged, clock):
    out, err = io.StringIO(), io.StringIO()
    call_command("draft_statements", "--month", "2027-03", stdout=out, stderr=err)
    assert "2027-03: 2 drafts, 2 lines, totals 240.00 EUR" in out.getvalue()
    assert "draft 2027-03" in err.getvalue()  # the progress bar
    assert Statement.objects.filter(state=StatementState.DRAFT).count() == 2


def test_draft_one_account_and_finalise_it(logged, clock):
    out = io.StringIO()
    call_command("draft_statements", "--month", "2027-03", "--account", "KES-01", stdout=out)
    assert "KES-01 2027-03: draft" in out.getvalue() and "160.00 EUR" in out.getvalue()
    statement = Statement.objects.get()
    out = io.StringIO()
    call_command("finalise_statement", str(statement.pk), "--by", "mara.manager", stdout=out)
    assert out.getvalue().startswith("S-000001: KES-01 2027-03, 160.00 EUR, checksum ")


def test_export_month_csv_and_pdf(logged, clock, tmp_path):
    call_command(
        "draft_statements", "--month", "2027-03", stdout=io.StringIO(), stderr=io.StringIO()
    )
    out = io.StringIO()
    call_command("export_statements", "--month", "2027-03", "--drafts", stdout=out)
    assert out.getvalue().splitlines()[0].startswith("statement_number,account_code,group,")
    pdf = tmp_path / "s.pdf"
    statement = Statement.objects.first()
    call_command(
        "export_statements",
        "--statement",
        str(statement.pk),
        "--pdf",
        str(pdf),
        stdout=io.StringIO(),
    )
    assert pdf.read_bytes().startswith(b"%PDF-")


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["draft_statements", "--month", "2027-13"], "does not exist"),
        (["draft_statements", "--month", "03/2027"], "form YYYY-MM"),
        (["draft_statements", "--month", "2027-03", "--account", "NOPE"], "no account"),
        (
            ["draft_statements", "--month", "2027-03", "--by", "ada.researcher"],
            "not active facility staff",
        ),
        (["finalise_statement", "999", "--by", "mara.manager"], "no statement with id 999"),
        (["export_statements"], "give --month"),
    ],
)
def test_bad_input_is_a_command_error(logged, args, message):
    with pytest.raises(CommandError, match=message):
        call_command(*args, stdout=io.StringIO(), stderr=io.StringIO())


def test_finalising_too_early_is_refused(logged, clock):
    clock.move_to(at(20, 9))
    call_command(
        "draft_statements", "--month", "2027-03", stdout=io.StringIO(), stderr=io.StringIO()
    )
    statement = Statement.objects.first()
    with pytest.raises(CommandError, match="not over yet"):
        call_command("finalise_statement", str(statement.pk), "--by", "mara.manager")
    assert Statement.objects.get(pk=statement.pk).state == StatementState.DRAFT


def test_bad_month_exits_non_zero_with_one_stderr_line(tmp_path):
    # A real process: Django prints a CommandError as one line on stderr and exits 1.
    env = {**os.environ, "DATABASE_URL": f"sqlite:///{tmp_path / 'unused.sqlite3'}"}
    done = subprocess.run(
        [sys.executable, "manage.py", "draft_statements", "--month", "2027-3"],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 1
    assert done.stderr.strip().splitlines() == [
        "CommandError: month '2027-3' is not in the form YYYY-MM, e.g. 2027-03"
    ]


ICS = """BEGIN:VCALENDAR
VERSION:2.0
PRODID:-//Beamledger tests//EN
BEGIN:VEVENT
UID:easter-monday-2027@example.org
DTSTART;VALUE=DATE:20270329
DTEND;VALUE=DATE:20270330
SUMMARY:Easter Monday
END:VEVENT
BEGIN:VEVENT
UID:closure-2027@example.org
DTSTART;VALUE=DATE:20271224
DTEND;VALUE=DATE:20271227
SUMMARY:Winter closure
END:VEVENT
BEGIN:VEVENT
UID:meeting@example.org
DTSTART:20270310T090000Z
DTEND:20270310T100000Z
SUMMARY:Staff meeting
END:VEVENT
END:VCALENDAR
"""


def test_import_holidays_from_icalendar(facility, tmp_path):
    # RFC 5545 §3.6.1: for all-day events DTEND is exclusive, so 24–27 Dec is three days.
    path = tmp_path / "holidays.ics"
    path.write_text(ICS.replace("\n", "\r\n"))
    out = io.StringIO()
    call_command("import_holidays", str(path), "--by", "mara.manager", stdout=out)
    assert [(h.day.isoformat(), h.name) for h in Holiday.objects.all()] == [
        ("2027-03-29", "Easter Monday"),
        ("2027-12-24", "Winter closure"),
        ("2027-12-25", "Winter closure"),
        ("2027-12-26", "Winter closure"),
    ]  # the timed staff meeting is not a holiday
    assert out.getvalue().strip().endswith("4 holiday(s) recorded")
    bad = tmp_path / "bad.ics"
    bad.write_text("not a calendar")
    with pytest.raises(CommandError, match="not an iCalendar file"):
        call_command("import_holidays", str(bad), "--by", "mara.manager", stdout=io.StringIO())
