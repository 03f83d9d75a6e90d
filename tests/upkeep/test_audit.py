"""The audit export (CSV, PDF) and the charts, read back with independent parsers."""

from __future__ import annotations

import csv
import datetime as dt
import io
import xml.etree.ElementTree as ET

import pytest

from facility.upkeep import audit, queries, services
from facility.upkeep.charts import counter_chart
from facility.upkeep.models import Counter, ServiceKind
from tests.upkeep.conftest import T0, add_session, at

WEEK = dt.timedelta(weeks=1)
SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture
def history(facility, clock, lab6):
    add_session(facility, lab6, at(1, 9), 4, beam=3.5, vents=3)
    add_session(facility, lab6, at(2, 9), 2, beam=1.25, vents=1)
    services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.EMITTER_CHANGE,
        performed_at=at(3, 8),
        by=facility.manager,
        performed_by="Ola Engineer",
        cost="1450.00",
        notes="LaB6 crystal, gun cleaned",
    )
    add_session(facility, lab6, at(3, 9), 5, beam=4.0, vents=2)
    services.record_meter_reading(
        instrument=lab6,
        counter=Counter.EMITTER_HOURS,
        value="4.5",
        read_at=at(3, 15),
        by=facility.manager,
    )
    add_session(facility, lab6, at(40, 9), 3, beam=2.75, vents=4)  # outside the period below
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=500, by=facility.manager
    )
    return lab6


def _sections(text: str) -> dict[str, list[dict[str, str]]]:
    """Read the sectioned CSV back with the standard library's csv module."""
    sections: dict[str, list[dict[str, str]]] = {}
    rows = list(csv.reader(io.StringIO(text)))
    i = 0
    while i < len(rows):
        if rows[i] and rows[i][0].startswith("# "):
            title, header = rows[i][0][2:], rows[i + 1]
            i += 2
            body = []
            while i < len(rows) and rows[i]:
                body.append(dict(zip(header, rows[i], strict=True)))
                i += 1
            sections[title] = body
        i += 1
    return sections


def test_csv_export_holds_what_an_auditor_asks_for(facility, history):
    content, ctype, name = audit.export_for(
        facility.manager, history, T0.date(), (T0 + 2 * WEEK).date(), fmt="csv"
    )
    assert ctype.startswith("text/csv") and name == "upkeep-lab6-sem-20250303-20250317.csv"
    text = content.decode()
    assert "3 sessions" in text and "11.00 h" in text  # 4 + 2 + 5 h in the period
    sections = _sections(text)
    sessions = sections["Sessions"]
    assert [s["beam-on hours"] for s in sessions] == ["3.50", "1.25", "4.00"]
    assert [s["vent cycles"] for s in sessions] == ["3", "1", "2"]
    assert sessions[0]["started"] == "2025-03-04 09:00" and sessions[0]["hours"] == "4.00"
    [event] = sections["Service events"]
    assert event["kind"] == "Emitter change" and event["cost"] == "1450.00"
    assert event["recorded by"] == facility.manager.username
    [reading] = sections["Meter readings"]
    # At 15:00 on day 3 the logbook had the 09:00–14:00 session since the change: 4.0 h;
    # the meter said 4.5 h → drift +0.50.
    assert (reading["meter"], reading["logbook"], reading["drift"]) == ("4.50", "4.00", "+0.50")
    [counter] = sections["Counters at the end of the period"]
    # At the end of the period (day 15): 4.5 h from the reading, nothing logged since.
    assert counter["value"] == "4.50" and counter["rated"] == "500.0"
    over_time = sections["Counters over time"]
    assert over_time[0]["time"] == "2025-03-03 00:00"
    # Day 0: before any session; the counter reads 0 then, and 4.5 at the end.
    label = "Emitter (LaB6)"
    assert over_time[0][label] == "0.00" and over_time[-1][label] == "4.50"


def test_pdf_export_is_a_pdf(facility, history):
    content, ctype, name = audit.export_for(
        facility.manager, history, T0.date(), (T0 + 2 * WEEK).date(), fmt="pdf"
    )
    # A PDF file starts with the %PDF-x.y header and ends with %%EOF (ISO 32000-1, 7.5.2, 7.5.5).
    assert ctype == "application/pdf" and name.endswith(".pdf")
    assert content.startswith(b"%PDF-1.") and content.rstrip().endswith(b"%%EOF")
    # One page of tables and one of charts at least (the /Type /Page objects of the page tree).
    assert content.count(b"/Type /Page\n") + content.count(b"/Type /Page ") >= 2


def test_chart_is_svg_with_limit_line_and_forecast(facility, lab6):
    for k in range(12):
        add_session(facility, lab6, T0 + k * WEEK, 10)
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=200, by=facility.manager
    )
    now = T0 + 12 * WEEK
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS), now=now)
    svg = counter_chart(status)
    root = ET.fromstring(svg)  # well-formed XML in the SVG namespace
    assert root.tag == f"{SVG}svg"
    texts = [t.text or "" for t in root.iter(f"{SVG}text")]
    joined = " ".join(texts)
    assert "limit 200 h (set by facility)" in joined
    # 80 h left at 10 h/week: the forecast date is 8 weeks after now at both rates.
    reach = (now + 8 * WEEK).strftime("%Y-%m-%d")
    assert f"forecast at 4-week rate: {reach}" in joined
    assert f"forecast at 12-week rate: {reach}" in joined
    # Repeatable: the same data gives the same file.
    assert counter_chart(status) == svg


def test_empty_period_and_reversed_dates(facility, lab6):
    report = audit.build_report(lab6, dt.date(2020, 1, 1), dt.date(2020, 1, 31))
    assert report.sessions == [] and report.totals["hours"] == 0
    assert "# Sessions" in audit.to_csv(report)
    with pytest.raises(Exception, match="before the first"):
        audit.build_report(lab6, dt.date(2020, 2, 1), dt.date(2020, 1, 1))
