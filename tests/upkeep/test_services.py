"""Upkeep writes and their refusals; a refused write leaves nothing behind."""

from __future__ import annotations

from decimal import Decimal

import pytest

from facility.errors import Conflict, Invalid, NotAllowed
from facility.instruments.models import EmitterType
from facility.upkeep import audit, queries, services
from facility.upkeep.models import Counter, Limit, MeterReading, ServiceEvent, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import add_session, at


def test_only_staff_write(facility, clock, lab6):
    for call in (
        lambda: services.record_service_event(
            instrument=lab6,
            kind=ServiceKind.ALIGNMENT,
            performed_at=at(1),
            by=facility.researcher_a,
        ),
        lambda: services.record_meter_reading(
            instrument=lab6,
            counter=Counter.EMITTER_HOURS,
            value=10,
            read_at=at(1),
            by=facility.researcher_a,
        ),
        lambda: services.set_limit(
            instrument=lab6, counter=Counter.EMITTER_HOURS, rated=10, by=facility.client
        ),
    ):
        with pytest.raises(NotAllowed):
            call()
    assert not ServiceEvent.objects.exists()
    assert not MeterReading.objects.exists()
    assert not Limit.objects.exists()
    with pytest.raises(NotAllowed):
        queries.may_view(facility.leader_a)
    assert not queries.visible_to(facility.researcher_a).exists()
    with pytest.raises(NotAllowed):
        audit.export_for(facility.researcher_a, lab6, at().date(), at(1).date())


@pytest.mark.parametrize(
    ("changes", "error", "message"),
    [
        ({"kind": "bake-out"}, Invalid, "Unknown kind"),
        ({"kind": ServiceKind.PUMP_SERVICE}, Invalid, "Choose the pump"),
        ({"part": "door seal"}, Invalid, "names no wear part"),
        ({"kind": ServiceKind.PART_REPLACEMENT}, Invalid, "Name the wear part"),
        ({"performed_at": at(61)}, Invalid, "in the future"),
        ({"performed_at": at(1, 10)}, Conflict, "A session was running"),
        ({"cost": "-5"}, Invalid, "cost must be 0 or more"),
        ({"cost": "a lot"}, Invalid, "cost must be a number"),
    ],
)
def test_service_event_refusals(facility, clock, lab6, changes, error, message):
    add_session(facility, lab6, at(1, 9), 4)
    args = {
        "instrument": lab6,
        "kind": ServiceKind.EMITTER_CHANGE,
        "performed_at": at(2),
        "by": facility.manager,
    }
    args.update(changes)
    with pytest.raises(error, match=message):
        services.record_service_event(**args)
    assert not ServiceEvent.objects.exists()


def test_pump_must_belong_to_the_instrument(facility, clock, lab6):
    other = f.PumpFactory(instrument=facility.sem, name="turbo")
    with pytest.raises(Invalid, match="belongs to another instrument"):
        services.record_service_event(
            instrument=lab6,
            kind=ServiceKind.PUMP_REPLACEMENT,
            pump=other,
            performed_at=at(2),
            by=facility.manager,
        )
    with pytest.raises(Invalid, match="installed on"):
        services.record_service_event(
            instrument=facility.sem,
            kind=ServiceKind.PUMP_SERVICE,
            pump=other,
            performed_at=at(-3650),
            by=facility.manager,
        )
    assert not ServiceEvent.objects.exists()


def test_no_emitter_no_emitter_change(facility, clock):
    coater = f.InstrumentFactory(code="coater-1", kind="coater", emitter_type=EmitterType.NONE)
    with pytest.raises(Invalid, match="has no emitter"):
        services.record_service_event(
            instrument=coater,
            kind=ServiceKind.EMITTER_CHANGE,
            performed_at=at(2),
            by=facility.manager,
        )


def test_a_non_resetting_event_may_fall_inside_a_session(facility, clock, lab6):
    # An alignment during a session changes no counter, so it is not refused.
    add_session(facility, lab6, at(1, 9), 4)
    event = services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.ALIGNMENT,
        performed_at=at(1, 10),
        by=facility.manager,
        notes="gun alignment",
        cost=Decimal("0"),
    )
    assert event.recorded_by == facility.manager and event.cost == Decimal("0.00")


def test_reading_refusals(facility, clock, lab6):
    pump = f.PumpFactory(instrument=lab6, name="rotary")
    base = {"instrument": lab6, "read_at": at(2), "by": facility.manager, "value": 10}
    with pytest.raises(Invalid, match="only hour meters"):
        services.record_meter_reading(counter=Counter.VENT_CYCLES, **base)
    with pytest.raises(Invalid, match="Choose the pump"):
        services.record_meter_reading(counter=Counter.PUMP_HOURS, **base)
    with pytest.raises(Invalid, match="value must be 0 or more"):
        services.record_meter_reading(counter=Counter.EMITTER_HOURS, **{**base, "value": -1})
    services.record_meter_reading(counter=Counter.PUMP_HOURS, pump=pump, **base)
    with pytest.raises(Conflict, match="already recorded"):
        services.record_meter_reading(counter=Counter.PUMP_HOURS, pump=pump, **base)
    assert MeterReading.objects.count() == 1


def test_set_limit_updates_in_place_and_names_parts_as_slugs(facility, lab6):
    first = services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated="750", by=facility.manager
    )
    second = services.set_limit(
        instrument=lab6,
        counter=Counter.EMITTER_HOURS,
        rated=800,
        warn_percent=90,
        by=facility.manager,
        note="maker's sheet",
    )
    assert first.pk == second.pk and Limit.objects.count() == 1
    assert second.rated == Decimal("800.0") and second.warn_percent == 90
    seal = services.set_limit(
        instrument=lab6,
        counter=Counter.VENT_CYCLES,
        part="Chamber Door Seal",
        rated=400,
        by=facility.manager,
    )
    assert seal.part == "chamber-door-seal"
    with pytest.raises(Invalid, match="1 to 100"):
        services.set_limit(
            instrument=lab6,
            counter=Counter.EMITTER_HOURS,
            rated=800,
            warn_percent=0,
            by=facility.manager,
        )
    with pytest.raises(Invalid, match="rated must be more than 0"):
        services.set_limit(
            instrument=lab6, counter=Counter.EMITTER_HOURS, rated=0, by=facility.manager
        )
    with pytest.raises(Invalid, match="Name the wear part"):
        services.set_limit(
            instrument=lab6, counter=Counter.VENT_CYCLES, rated=5, by=facility.manager
        )
    services.remove_limit(limit=seal, by=facility.manager)
    # Back to the default for LaB6 (1000 h) once the facility's own rating is removed.
    services.remove_limit(limit=second, by=facility.manager)
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS))
    assert status.limit.is_default and status.limit.rated == 1000.0


def test_update_service_event_keeps_its_reset(facility, clock, lab6):
    event = services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.EMITTER_CHANGE,
        performed_at=at(2),
        by=facility.manager,
    )
    event = services.update_service_event(
        event=event, by=facility.manager, cost="1250.50", notes="new LaB6 crystal"
    )
    event.refresh_from_db()
    assert event.cost == Decimal("1250.50") and event.notes == "new LaB6 crystal"
    with pytest.raises(NotAllowed):
        services.update_service_event(event=event, by=facility.researcher_b, notes="x")


def test_acknowledged_alerts_leave_the_dashboard(facility, clock, lab6):
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=10, by=facility.manager
    )
    add_session(facility, lab6, at(1, 9), 11)  # 11 h of 10: past both thresholds
    raised = {a.level: a for a in services.check_limits(within_days=0)}
    warn, limit = raised["warn"], raised["limit"]
    with pytest.raises(NotAllowed):
        services.acknowledge_alert(alert=warn, by=facility.researcher_a)
    services.acknowledge_alert(alert=warn, by=facility.manager)
    assert list(queries.open_alerts(lab6)) == [limit]
