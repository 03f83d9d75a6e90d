"""``manage.py upkeep_report``: output, files, progress, and bad input."""

from __future__ import annotations

import os
import subprocess
import sys
from io import StringIO
from pathlib import Path

import pytest
from django.core.management import CommandError, call_command

from facility.upkeep import services
from facility.upkeep.models import Counter
from tests.upkeep.conftest import add_session, at

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def used_lab6(facility, clock, lab6):
    add_session(facility, lab6, at(1, 9), 4, beam=3.5)
    add_session(facility, lab6, at(50, 9), 2, beam=1.5)
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=10, by=facility.manager
    )
    return lab6


def test_table(used_lab6):
    out, err = StringIO(), StringIO()
    call_command("upkeep_report", "--instrument", "lab6-sem", stdout=out, stderr=err)
    lines = out.getvalue().splitlines()
    assert lines[0].split()[:2] == ["counter", "value"]
    # 3.5 + 1.5 = 5 h of 10 h.
    assert "Emitter (LaB6)" in lines[1] and "5.0 h" in lines[1] and "50%" in lines[1]
    assert "upkeep_report: counting lab6-sem" in err.getvalue()


def test_csv_pdf_and_charts_to_files(used_lab6, tmp_path):
    err = StringIO()
    call_command(
        "upkeep_report",
        "--instrument=lab6-sem",
        "--from=2025-03-01",
        "--to=2025-05-01",
        "--format=csv",
        f"--output={tmp_path / 'a.csv'}",
        f"--charts={tmp_path}",
        stderr=err,
        stdout=StringIO(),
    )
    assert (tmp_path / "a.csv").read_text().count("\n") > 10
    [chart] = tmp_path.glob("*.svg")
    assert chart.name == "lab6-sem_emitter_hours.svg"
    assert "chart 1/1" in err.getvalue()
    call_command(
        "upkeep_report",
        "--instrument=lab6-sem",
        "--format=pdf",
        f"--output={tmp_path / 'a.pdf'}",
        stderr=StringIO(),
    )
    assert (tmp_path / "a.pdf").read_bytes().startswith(b"%PDF-")


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--instrument=nope"], "No instrument with code 'nope'"),
        (["--instrument=lab6-sem", "--format=pdf"], "needs --output"),
        (["--instrument=lab6-sem", "--from=2025-05-01", "--to=2025-04-01"], "comes before"),
        (["--instrument=lab6-sem", "--charts=/no/such/dir"], "is not a directory"),
    ],
)
def test_bad_input_in_process(used_lab6, args, message):
    with pytest.raises(CommandError, match=message):
        call_command("upkeep_report", *args, stdout=StringIO(), stderr=StringIO())


def test_bad_input_exits_nonzero_with_one_line():
    # A separate process: the exit status and stderr as a shell sees them. A bad date is caught
    # before the database is opened, so this needs no test database.
    result = subprocess.run(
        [sys.executable, "manage.py", "upkeep_report", "--instrument=x", "--from=2025-13-01"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
        env={**os.environ, "DJANGO_SETTINGS_MODULE": "facility.settings"},
    )
    assert result.returncode == 1
    assert result.stderr.strip().splitlines() == [
        "CommandError: '2025-13-01' is not a date; write it as YYYY-MM-DD."
    ]
    assert result.stdout == ""
