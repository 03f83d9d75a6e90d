"""Who changed what, when: history rows on every change path (services and the admin)."""

from __future__ import annotations

import pytest
from django.contrib.auth.models import Permission
from django.urls import reverse

from facility.upkeep import services
from facility.upkeep.models import Counter, Limit, MeterReading, ServiceEvent, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import add_session, at


def _types(model_history) -> list[str]:
    return list(model_history.order_by("history_id").values_list("history_type", flat=True))


def test_service_writes_leave_history_with_their_author(facility, clock, lab6):
    event = services.record_service_event(
        instrument=lab6, kind=ServiceKind.BAKE_OUT, performed_at=at(3), by=facility.manager
    )
    services.update_service_event(event=event, by=facility.manager, cost="90")
    assert _types(event.history) == ["+", "~"]
    assert {h.history_user for h in event.history.all()} == {facility.manager}
    assert event.history.earliest("history_id").cost is None
    assert event.history.latest("history_id").cost == 90

    reading = services.record_meter_reading(
        instrument=lab6,
        counter=Counter.EMITTER_HOURS,
        value=12,
        read_at=at(3),
        by=facility.manager,
    )
    assert reading.history.get().history_user == facility.manager

    limit = services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=900, by=facility.manager
    )
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=950, by=facility.manager
    )
    services.remove_limit(limit=Limit.objects.get(pk=limit.pk), by=facility.manager)
    rows = Limit.history.filter(id=limit.pk).order_by("history_id")
    assert [h.history_type for h in rows] == ["+", "~", "-"]
    assert [float(h.rated) for h in rows] == [900.0, 950.0, 950.0]


@pytest.fixture
def staff_client(client, facility):
    facility.manager.user_permissions.add(
        *Permission.objects.filter(content_type__app_label="upkeep")
    )
    client.force_login(facility.manager)
    return client


def _event_form(instrument, **extra):
    data = {
        "instrument": instrument.pk,
        "kind": ServiceKind.EMITTER_CHANGE,
        "pump": "",
        "part": "",
        "performed_at_0": "2025-03-05",
        "performed_at_1": "08:00:00",
        "performed_by": "field engineer",
        "notes": "",
        "cost": "",
    }
    data.update(extra)
    return data


def test_admin_changes_leave_history(facility, clock, lab6, staff_client):
    response = staff_client.post(
        reverse("admin:upkeep_serviceevent_add"), _event_form(lab6, cost="1200")
    )
    assert response.status_code == 302, response.content[:2000]
    event = ServiceEvent.objects.get()
    assert event.recorded_by == facility.manager
    response = staff_client.post(
        reverse("admin:upkeep_serviceevent_change", args=[event.pk]),
        _event_form(lab6, cost="1300", notes="crystal from the spare stock"),
    )
    assert response.status_code == 302
    assert _types(event.history) == ["+", "~"]
    assert {h.history_user for h in event.history.all()} == {facility.manager}
    page = staff_client.get(reverse("admin:upkeep_serviceevent_history", args=[event.pk]))
    assert page.status_code == 200 and facility.manager.username in page.content.decode()

    response = staff_client.post(
        reverse("admin:upkeep_limit_add"),
        {
            "instrument": lab6.pk,
            "counter": Counter.EMITTER_HOURS,
            "pump": "",
            "part": "",
            "rated": "900",
            "warn_percent": "75",
            "note": "maker's sheet",
        },
    )
    assert response.status_code == 302
    limit = Limit.objects.get()
    assert limit.set_by == facility.manager
    assert limit.history.get().history_user == facility.manager

    response = staff_client.post(
        reverse("admin:upkeep_meterreading_add"),
        {
            "instrument": lab6.pk,
            "counter": Counter.EMITTER_HOURS,
            "pump": "",
            "value": "42.5",
            "read_at_0": "2025-03-06",
            "read_at_1": "09:00:00",
            "note": "",
        },
    )
    assert response.status_code == 302
    assert MeterReading.objects.get().history.get().history_user == facility.manager


def test_admin_applies_the_same_rules(facility, clock, lab6, staff_client):
    other = f.PumpFactory(instrument=facility.sem, name="turbo")
    add_session(facility, lab6, at(2, 7), 4)  # 07:00–11:00 on 5 March
    response = staff_client.post(
        reverse("admin:upkeep_serviceevent_add"),
        _event_form(lab6, kind=ServiceKind.PUMP_SERVICE, pump=other.pk),
    )
    assert response.status_code == 200
    assert "belongs to another instrument" in response.content.decode()
    # An emitter change at 08:00 on 5 March would fall inside the 07:00–11:00 session.
    response = staff_client.post(reverse("admin:upkeep_serviceevent_add"), _event_form(lab6))
    assert response.status_code == 200
    assert "A session was running" in response.content.decode()
    assert not ServiceEvent.objects.exists()
    assert not ServiceEvent.history.exists()
