"""Upkeep pages (staff only): counters against their limits with rates and forecasts, the forms
that record service events, meter readings and limits, alerts, charts and the audit export.

The instrument's turbo pump counts chamber hours: three closed sessions of 10 h, one a week, the
first exactly three weeks before the frozen clock — so every figure can be worked out by hand.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
import xml.etree.ElementTree as ET

import pytest
from django.urls import reverse

from facility.upkeep import services
from facility.upkeep.models import Alert, Limit, MeterReading, ServiceEvent
from tests import factories as f
from tests.pages.conftest import NOW, closed_session

pytestmark = pytest.mark.django_db

NOT_STAFF = ["researcher_a", "leader_a", "client"]


@pytest.fixture
def upkeep(facility, frozen):
    pump = f.PumpFactory(instrument=facility.sem, name="turbo", runs_continuously=False)
    for weeks in (3, 2, 1):
        closed_session(facility, NOW - dt.timedelta(weeks=weeks), 10)
    services.set_limit(
        instrument=facility.sem, counter="pump_hours", pump=pump, rated=100, by=facility.manager
    )
    return pump


def _text(response) -> str:
    return re.sub(r"\s+", " ", response.content.decode())


def _pages(facility, pump) -> list[str]:
    code = facility.sem.code
    return [
        reverse("upkeep"),
        reverse("upkeep-instrument", args=[code]),
        reverse("upkeep-chart", args=[code]) + f"?counter=pump_hours&pump={pump.pk}",
        reverse("upkeep-audit", args=[code]) + "?first_day=2030-02-01&last_day=2030-03-06"
        "&format=csv",
    ]


@pytest.mark.parametrize("persona", NOT_STAFF)
def test_upkeep_pages_are_for_staff_only(as_user, facility, upkeep, persona):
    client = as_user(getattr(facility, persona))
    for url in _pages(facility, upkeep):
        assert client.get(url).status_code == 403, url
    code = facility.sem.code
    for name in ("upkeep-service-event", "upkeep-meter-reading", "upkeep-limit"):
        assert client.post(reverse(name, args=[code]), {}).status_code == 403, name


def test_upkeep_pages_for_staff(as_user, facility, upkeep):
    client = as_user(facility.manager)
    for url in _pages(facility, upkeep):
        assert client.get(url).status_code == 200, url
    assert client.get(reverse("upkeep-instrument", args=["no-such"])).status_code == 404
    chart = reverse("upkeep-chart", args=[facility.sem.code])
    assert client.get(chart + "?counter=nonsense").status_code == 404
    assert client.get(chart + "?counter=vent_cycles&part=door-seal").status_code == 404
    other = f.PumpFactory(instrument=f.InstrumentFactory(code="tem-1"), name="ion")
    assert client.get(chart + f"?counter=pump_hours&pump={other.pk}").status_code == 404


def test_writes_are_post_only(as_user, facility, upkeep):
    client = as_user(facility.manager)
    for name in ("upkeep-service-event", "upkeep-meter-reading", "upkeep-limit"):
        assert client.get(reverse(name, args=[facility.sem.code])).status_code == 405


def test_overview_shows_share_rate_and_forecast(as_user, facility, upkeep):
    body = _text(as_user(facility.manager).get(reverse("upkeep")))
    row = body[body.index("Pump: turbo") :]
    row = row[: row.index("</tr>")]
    # 3 × 10 h of chamber time against 100 h rated: 30 % (hand-computed).
    assert "30.0 h" in row and "100.0 h" in row and "30 %" in row
    # Both windows are cut to the three weeks of data: 30 h / 3 weeks = 10 h a week.
    assert row.count("10.0 h/week") == 2
    # 70 h left at 10 h a week: 7 weeks after 6 March 2030, 24 April; both rates agree, so
    # there is no spread (forecast.py: linear run-rate projection).
    assert "about 2030-04-24" in row


def test_record_a_service_event(as_user, facility, upkeep):
    client = as_user(facility.manager)
    url = reverse("upkeep-service-event", args=[facility.sem.code])
    response = client.post(
        url,
        {
            "event-kind": "pump_service",
            "event-pump": upkeep.pk,
            "event-performed_at": "2030-03-05T18:30",
            "event-performed_by": "service engineer",
            "event-cost": "420.00",
        },
    )
    assert response.status_code == 302
    event = ServiceEvent.objects.get()
    assert (event.pump, event.recorded_by, str(event.cost)) == (upkeep, facility.manager, "420.00")
    body = _text(client.get(response["Location"]))
    assert "Recorded: pump service." in body
    row = body[body.index("Pump: turbo") :]
    # The service starts the pump's count again: no session since 18:30 on 5 March.
    assert "0.0 h" in row[: row.index("</tr>")]


def test_a_refused_service_event_is_explained_and_writes_nothing(as_user, facility, upkeep):
    client = as_user(facility.manager)
    url = reverse("upkeep-service-event", args=[facility.sem.code])
    response = client.post(
        url, {"event-kind": "pump_service", "event-performed_at": "2030-03-05T18:30"}
    )
    assert response.status_code == 400
    body = _text(response)
    assert "Choose the pump for a pump service." in body
    assert 'id="id_event-pump_error"' in body
    assert not ServiceEvent.objects.exists()


def test_record_a_meter_reading_and_refuse_one_in_the_future(as_user, facility, upkeep):
    client = as_user(facility.manager)
    url = reverse("upkeep-meter-reading", args=[facility.sem.code])
    later = client.post(
        url,
        {
            "reading-counter": "emitter_hours",
            "reading-value": "600",
            "reading-read_at": "2030-03-07T09:00",
        },
    )
    assert later.status_code == 400
    assert "That time is in the future" in _text(later)
    assert not MeterReading.objects.exists()
    done = client.post(
        url,
        {
            "reading-counter": "emitter_hours",
            "reading-value": "600",
            "reading-read_at": "2030-03-06T09:00",
        },
    )
    assert done.status_code == 302
    assert MeterReading.objects.get().value == 600


def test_set_a_limit_and_refuse_one_without_its_part(as_user, facility, upkeep):
    client = as_user(facility.manager)
    url = reverse("upkeep-limit", args=[facility.sem.code])
    refused = client.post(
        url, {"limit-counter": "vent_cycles", "limit-rated": "500", "limit-warn_percent": "80"}
    )
    assert refused.status_code == 400
    assert "Name the wear part" in _text(refused)
    assert Limit.objects.count() == 1  # the pump's, from the fixture
    done = client.post(
        url,
        {
            "limit-counter": "vent_cycles",
            "limit-part": "Chamber door seal",
            "limit-rated": "500",
            "limit-warn_percent": "90",
        },
    )
    assert done.status_code == 302
    limit = Limit.objects.get(counter="vent_cycles")
    assert (limit.part, limit.rated, limit.warn_percent) == ("chamber-door-seal", 500, 90)


def _alert(facility) -> Alert:
    return Alert.objects.create(
        topic="upkeep:test:warn",
        counter_key="fe-sem:pump_hours",
        instrument=facility.sem,
        counter="pump_hours",
        level="warn",
        value=85,
        rated=100,
        message="Field-emission SEM — turbo: 85 h of 100 (85%)",
        raised_at=NOW,
    )


def test_alerts_on_the_staff_home_and_acknowledged_there(as_user, facility, upkeep):
    alert = _alert(facility)
    client = as_user(facility.manager)
    home = _text(client.get(reverse("home")))
    assert "Upkeep alerts" in home and "turbo: 85 h of 100" in home
    ack = reverse("upkeep-alert-ack", args=[alert.pk])
    assert as_user(facility.researcher_a).post(ack).status_code == 403
    response = client.post(ack, {"next": reverse("home")})
    assert response["Location"] == reverse("home")
    alert.refresh_from_db()
    assert alert.acknowledged_by == facility.manager
    after = _text(client.get(reverse("home")))
    assert "Alert acknowledged: Field-emission SEM — turbo" in after  # the message says so
    assert "Acknowledge: Field-emission SEM" not in after and "No open upkeep alerts" in after
    # An address elsewhere is not followed.
    assert client.post(ack, {"next": "https://elsewhere.example/"})["Location"] == reverse("upkeep")


def test_instrument_page_shows_counters_to_staff_only(as_user, facility, upkeep):
    url = reverse("instrument-detail", args=[facility.sem.code])
    staff = _text(as_user(facility.manager).get(url))
    assert "Pump: turbo (Turbomolecular): 30.0 h of 100.0 h (30 %)" in staff
    assert reverse("upkeep-instrument", args=[facility.sem.code]) in staff
    researcher = _text(as_user(facility.researcher_a).get(url))
    assert "Pump: turbo" not in researcher


def test_chart_is_an_svg_image(as_user, facility, upkeep):
    url = (
        reverse("upkeep-chart", args=[facility.sem.code]) + f"?counter=pump_hours&pump={upkeep.pk}"
    )
    response = as_user(facility.manager).get(url)
    assert response["Content-Type"] == "image/svg+xml"
    # Well-formed XML whose root is an SVG element (W3C SVG 1.1 namespace).
    root = ET.fromstring(response.content)
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    page = _text(
        as_user(facility.manager).get(reverse("upkeep-instrument", args=[facility.sem.code]))
    )
    assert url.replace("&", "&amp;") in page


def test_audit_export_as_csv_and_pdf(as_user, facility, upkeep):
    client = as_user(facility.manager)
    url = reverse("upkeep-audit", args=[facility.sem.code])
    response = client.get(
        url, {"first_day": "2030-02-01", "last_day": "2030-03-06", "format": "csv"}
    )
    assert (
        response["Content-Disposition"]
        == 'attachment; filename="upkeep-fe-sem-20300201-20300306.csv"'
    )
    rows = list(csv.reader(io.StringIO(response.content.decode())))  # RFC 4180 via Python's csv
    totals = next(r for r in rows if r and r[0] == "totals")
    assert totals[1:3] == ["3 sessions", "30.00 h"]
    pdf = client.get(url, {"first_day": "2030-02-01", "last_day": "2030-03-06", "format": "pdf"})
    assert pdf["Content-Type"] == "application/pdf"
    assert pdf.content.startswith(b"%PDF-")  # the file header of ISO 32000-1, 7.5.2


def test_audit_export_refuses_a_backwards_range_on_the_page(as_user, facility, upkeep):
    url = reverse("upkeep-audit", args=[facility.sem.code])
    response = as_user(facility.manager).get(
        url, {"first_day": "2030-03-06", "last_day": "2030-02-01", "format": "csv"}
    )
    assert response.status_code == 400
    assert "The last day comes before the first." in _text(response)
