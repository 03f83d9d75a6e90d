"""Check-in, check-out and logging, with each refusal."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
import time_machine
from django.db import IntegrityError, transaction

from facility.bookings.models import BookingState
from facility.errors import Closed, Conflict, Invalid, NotAllowed, NotTrained
from facility.logbook import services
from facility.logbook.models import Conditions, InstrumentSession, Specimen
from tests import factories as f
from tests.bookings.test_book import _book, at


@pytest.fixture(autouse=True)
def clock(settings):
    settings.TIME_ZONE = "Europe/Vienna"
    with time_machine.travel(at(1, 7), tick=False) as traveller:
        yield traveller


def test_check_in_from_the_booking_and_out(facility, clock):
    booking = _book(facility, start=at(1, 9), end=at(1, 11))
    clock.move_to(at(1, 8, 45))
    session = services.check_in(user=facility.researcher_a, instrument=facility.sem)
    assert session.booking == booking
    assert session.account == facility.account_a
    clock.move_to(at(1, 10, 30))
    session = services.check_out(session=session, by=facility.researcher_a, vent_cycles=2)
    # 08:45 → 10:30 is 1 h 45 min = 1.75 h; beam-on defaults to the session length.
    assert session.beam_on_hours == Decimal("1.75")
    assert session.vent_cycles == 2
    booking.refresh_from_db()
    assert booking.state == BookingState.DONE


def test_too_early_check_in_is_refused(facility, clock):
    _book(facility, start=at(1, 12), end=at(1, 13))
    clock.move_to(at(1, 9))
    with pytest.raises(Invalid, match="walk-up session needs an account"):
        services.check_in(user=facility.researcher_a, instrument=facility.sem)
    booking = facility.researcher_a.bookings.get()
    with pytest.raises(Conflict, match="check in from 30 minutes before"):
        services.check_in(user=facility.researcher_a, instrument=facility.sem, booking=booking)
    assert InstrumentSession.objects.count() == 0


def test_walk_up_when_free(facility, clock):
    clock.move_to(at(1, 10))
    session = services.check_in(
        user=facility.researcher_b, instrument=facility.sem, account=facility.account_b
    )
    assert session.booking is None and session.is_open


def test_walk_up_refused_while_someone_else_holds_the_slot(facility, clock):
    _book(facility, start=at(1, 9), end=at(1, 11))
    clock.move_to(at(1, 9, 30))
    with pytest.raises(Conflict, match="booked by someone else"):
        services.check_in(
            user=facility.researcher_b, instrument=facility.sem, account=facility.account_b
        )


def test_walk_up_needs_training_and_own_account(facility, clock):
    clock.move_to(at(1, 10))
    stranger = f.UserFactory(username="ivo.untrained")
    f.MembershipFactory(user=stranger, group=facility.group_b)
    with pytest.raises(NotTrained):
        services.check_in(user=stranger, instrument=facility.sem, account=facility.account_b)
    with pytest.raises(NotAllowed, match="does not belong"):
        services.check_in(
            user=facility.researcher_b, instrument=facility.sem, account=facility.account_a
        )


def test_one_open_session_per_instrument(facility, clock):
    clock.move_to(at(1, 10))
    services.check_in(
        user=facility.researcher_b, instrument=facility.sem, account=facility.account_b
    )
    with pytest.raises(Conflict, match="already has an open session"):
        services.check_in(
            user=facility.researcher_a, instrument=facility.sem, account=facility.account_a
        )
    assert InstrumentSession.objects.count() == 1


def test_open_session_constraint_holds_in_the_database(facility):
    f.InstrumentSessionFactory(instrument=facility.sem, ended_at=None, beam_on_hours=None)
    with pytest.raises(IntegrityError), transaction.atomic():
        f.InstrumentSessionFactory(instrument=facility.sem, ended_at=None, beam_on_hours=None)


def test_check_out_rules(facility, clock):
    clock.move_to(at(1, 10))
    session = services.check_in(
        user=facility.researcher_b, instrument=facility.sem, account=facility.account_b
    )
    clock.move_to(at(1, 12))
    with pytest.raises(NotAllowed):
        services.check_out(session=session, by=facility.researcher_a)
    with pytest.raises(Invalid, match=r"between 0 and the session's 2\.00 h"):
        services.check_out(session=session, by=facility.researcher_b, beam_on_hours=3)
    with pytest.raises(Invalid, match="Vent cycles"):
        services.check_out(session=session, by=facility.researcher_b, vent_cycles=-1)
    session.refresh_from_db()
    assert session.is_open
    services.check_out(session=session, by=facility.researcher_b, beam_on_hours=1.5)
    with pytest.raises(Closed, match="already checked out"):
        services.check_out(session=session, by=facility.researcher_b)


def test_idempotent_check_in(facility, clock):
    clock.move_to(at(1, 10))
    kwargs = dict(
        user=facility.researcher_b,
        instrument=facility.sem,
        account=facility.account_b,
        idempotency_key="pc-7",
    )
    assert services.check_in(**kwargs).pk == services.check_in(**kwargs).pk


def test_log_specimen_coating_and_conditions(facility, clock):
    clock.move_to(at(1, 10))
    session = services.check_in(
        user=facility.researcher_b, instrument=facility.sem, account=facility.account_b
    )
    specimen = services.record_specimen(
        session=session,
        by=facility.researcher_b,
        name="PCL scaffold",
        material="polycaprolactone fibres",
        material_class="polymer",
        conductivity="insulating",
        form="fibre",
        feature_size_nm=300,
    )
    assert specimen.group == facility.group_b
    coating = services.set_coating(
        session=session, by=facility.researcher_b, material="Au-Pd", thickness_nm=5
    )
    assert str(coating) == "5 nm Au-Pd"
    services.add_conditions(
        session=session, by=facility.researcher_b, accelerating_voltage_kv=2, working_distance_mm=5
    )
    services.add_conditions(
        session=session, by=facility.researcher_b, accelerating_voltage_kv=10, detector="BSE"
    )
    assert session.conditions.count() == 2


@pytest.mark.parametrize(
    ("values", "field"),
    [
        ({"accelerating_voltage_kv": 0}, "accelerating_voltage_kv"),
        ({"accelerating_voltage_kv": 500}, "accelerating_voltage_kv"),
        ({"working_distance_mm": -1}, "working_distance_mm"),
        ({"dwell_time_us": "fast"}, "dwell_time_us"),
        ({"vacuum_mode": "outer space"}, "vacuum_mode"),
        ({"colour": "blue"}, "colour"),
    ],
)
def test_implausible_conditions_are_refused(facility, values, field):
    session = f.InstrumentSessionFactory(operator=facility.researcher_a, account=facility.account_a)
    with pytest.raises(Invalid) as caught:
        services.add_conditions(session=session, by=facility.researcher_a, **values)
    assert field in caught.value.fields
    assert Conditions.objects.count() == 0


def test_specimen_rules(facility):
    session = f.InstrumentSessionFactory(operator=facility.researcher_a, account=facility.account_a)
    with pytest.raises(Invalid, match="material class"):
        services.record_specimen(session=session, by=facility.researcher_a, name="x", material="y")
    with pytest.raises(Invalid, match="Unknown conductivity"):
        services.record_specimen(
            session=session,
            by=facility.researcher_a,
            name="x",
            material="y",
            material_class="metal",
            conductivity="superb",
            form="bulk",
        )
    foreign = f.SpecimenFactory(group=facility.group_b, owner=facility.researcher_b)
    with pytest.raises(NotAllowed, match="another group"):
        services.record_specimen(session=session, by=facility.researcher_a, specimen=foreign)
    assert Specimen.objects.count() == 1


def test_coating_rules(facility):
    session = f.InstrumentSessionFactory(operator=facility.researcher_a, account=facility.account_a)
    with pytest.raises(Invalid, match="specimen before its coating"):
        services.set_coating(
            session=session, by=facility.researcher_a, material="C", thickness_nm=10
        )
    session.specimen = f.SpecimenFactory(group=facility.group_a, owner=facility.researcher_a)
    session.save()
    with pytest.raises(Invalid, match="no coating thickness"):
        services.set_coating(
            session=session, by=facility.researcher_a, material="none", thickness_nm=5
        )
    with pytest.raises(Invalid, match="more than 0"):
        services.set_coating(
            session=session, by=facility.researcher_a, material="Pt", thickness_nm=0
        )
    assert services.set_coating(session=session, by=facility.researcher_a, material="none").pk


def test_other_group_cannot_log_on_my_session(facility):
    session = f.InstrumentSessionFactory(operator=facility.researcher_a, account=facility.account_a)
    with pytest.raises(NotAllowed):
        services.add_conditions(
            session=session, by=facility.researcher_b, accelerating_voltage_kv=5
        )
    with pytest.raises(NotAllowed):
        services.update_session(session=session, by=facility.researcher_b, notes="x")


def test_staff_check_in_someone_else_at_a_past_time(facility):
    past = at(1, 10) - dt.timedelta(days=3)  # Friday 26 Feb, normal hours
    session = services.check_in(
        user=facility.researcher_a,
        instrument=facility.sem,
        account=facility.account_a,
        by=facility.manager,
        now=past,
    )
    assert session.started_at == past
