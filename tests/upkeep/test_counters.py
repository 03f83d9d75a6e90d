"""Derived counters against sums worked out by hand over sessions and resets."""

from __future__ import annotations

import datetime as dt

import pytest

from facility.instruments.models import EmitterType
from facility.upkeep import queries, services
from facility.upkeep.counters import CounterSpec, Timeline, use_between
from facility.upkeep.defaults import BEAM_ON, CALENDAR, CHAMBER, VENTS
from facility.upkeep.models import Counter, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import add_session, at


@pytest.fixture
def week_of_sessions(facility, lab6):
    """Four sessions on the LaB6 SEM, with an emitter change between the second and third."""
    add_session(facility, lab6, at(1, 9), 4, beam=3.5, vents=3)
    add_session(facility, lab6, at(2, 9), 2, beam=1.25, vents=1)
    add_session(facility, lab6, at(3, 9), 5, beam=4.0, vents=2)
    add_session(facility, lab6, at(4, 9), 3, beam=2.75, vents=4)
    return lab6


def test_emitter_hours_are_beam_on_hours_since_the_last_change(facility, clock, week_of_sessions):
    lab6 = week_of_sessions
    spec = CounterSpec(lab6, Counter.EMITTER_HOURS)
    assert spec.basis == BEAM_ON
    # No change recorded yet: all beam-on hours, 3.5 + 1.25 + 4.0 + 2.75 = 11.5 h.
    assert queries.counter_status(spec).value == pytest.approx(11.5)
    services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.EMITTER_CHANGE,
        performed_at=at(3, 8),
        by=facility.manager,
        performed_by="service engineer",
    )
    status = queries.counter_status(spec)
    # After the change on day 3 at 08:00 only days 3 and 4 count: 4.0 + 2.75 = 6.75 h.
    assert status.value == pytest.approx(6.75)
    assert status.since == at(3, 8) and status.since_known
    # Just before the change the old emitter had 3.5 + 1.25 = 4.75 h.
    assert Timeline(spec).value_at(at(3, 7)) == pytest.approx(4.75)


def test_open_session_counts_only_once_closed(facility, clock, week_of_sessions):
    lab6 = week_of_sessions
    f.InstrumentSessionFactory(
        instrument=lab6,
        operator=facility.researcher_b,
        account=facility.account_b,
        started_at=at(59),
        ended_at=None,
        beam_on_hours=None,
    )
    # Still 3.5 + 1.25 + 4.0 + 2.75 = 11.5 h: the open session has no beam-on hours yet.
    assert queries.counter_status(CounterSpec(lab6, Counter.EMITTER_HOURS)).value == 11.5


def test_pump_hours_are_session_time_since_install_or_service(facility, clock, week_of_sessions):
    lab6 = week_of_sessions
    rotary = f.PumpFactory(instrument=lab6, name="rotary", kind="rotary", installed_on=at().date())
    spec = CounterSpec(lab6, Counter.PUMP_HOURS, pump=rotary)
    assert spec.basis == CHAMBER
    # Chamber time is session length, not beam-on: 4 + 2 + 5 + 3 = 14 h.
    assert queries.counter_status(spec).value == pytest.approx(14.0)
    services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.PUMP_SERVICE,
        pump=rotary,
        performed_at=at(3, 7.5),
        by=facility.manager,
        cost="180.00",
    )
    # Serviced on day 3 at 07:30: 5 + 3 = 8 h since.
    assert queries.counter_status(spec).value == pytest.approx(8.0)
    # The emitter counter is not reset by a pump service: 11.5 h.
    assert queries.counter_status(CounterSpec(lab6, Counter.EMITTER_HOURS)).value == 11.5


def test_a_pump_installed_later_counts_from_its_installation_day(facility, clock, week_of_sessions):
    lab6 = week_of_sessions
    scroll = f.PumpFactory(instrument=lab6, name="scroll", kind="scroll", installed_on=at(3).date())
    # Installed at midnight starting day 3: the sessions of days 3 and 4, 5 + 3 = 8 h.
    assert queries.counter_status(CounterSpec(lab6, Counter.PUMP_HOURS, pump=scroll)).value == 8.0


def test_a_continuously_running_pump_counts_calendar_time(facility, clock):
    ion = f.PumpFactory(
        instrument=facility.sem,
        name="ion getter",
        kind="ion_getter",
        runs_continuously=True,
        installed_on=dt.date(2025, 1, 1),
    )
    spec = CounterSpec(facility.sem, Counter.PUMP_HOURS, pump=ion)
    assert spec.basis == CALENDAR
    now = at(60)  # 2025-05-02 00:00 UTC
    # 1 Jan → 2 May 2025: 31 + 28 + 31 + 30 + 1 = 121 days = 2904 h, with no session at all.
    assert queries.counter_status(spec, now=now).value == pytest.approx(2904.0)
    services.record_service_event(
        instrument=facility.sem,
        kind=ServiceKind.PUMP_SERVICE,
        pump=ion,
        performed_at=dt.datetime(2025, 4, 1, 12, tzinfo=dt.UTC),
        by=facility.manager,
    )
    # 1 Apr 12:00 → 2 May 00:00: 30 days 12 h = 732 h.
    assert queries.counter_status(spec, now=now).value == pytest.approx(732.0)
    # Calendar time grows at 24 × 7 = 168 h per week over both windows.
    assert queries.counter_status(spec, now=now).rates == pytest.approx({4: 168.0, 12: 168.0})


def test_a_schottky_emitter_counts_calendar_time(facility, clock):
    # The persona's SEM is field emission (Schottky): kept hot day and night, so its life is
    # calendar time (DOMAIN.md: "continuous, years"), not the sessions' beam-on hours.
    assert facility.sem.emitter_type == EmitterType.SCHOTTKY
    add_session(facility, facility.sem, at(10, 9), 6, beam=5)
    services.record_service_event(
        instrument=facility.sem,
        kind=ServiceKind.EMITTER_CHANGE,
        performed_at=at(10),
        by=facility.manager,
    )
    status = queries.counter_status(CounterSpec(facility.sem, Counter.EMITTER_HOURS))
    # Day 10 00:00 → day 60 00:00 = 50 days = 1200 h, whatever the 5 beam-on hours.
    assert status.spec.basis == CALENDAR
    assert status.value == pytest.approx(1200.0)


def test_vent_cycles_per_wear_part_reset_by_its_replacement(facility, clock, week_of_sessions):
    lab6 = week_of_sessions
    services.set_limit(
        instrument=lab6,
        counter=Counter.VENT_CYCLES,
        part="Chamber door seal",
        rated=500,
        by=facility.manager,
    )
    spec = CounterSpec(lab6, Counter.VENT_CYCLES, part="chamber-door-seal")
    assert spec.basis == VENTS
    assert [s.spec for s in queries.instrument_status(lab6)][-1] == spec
    # 3 + 1 + 2 + 4 = 10 vent cycles.
    assert queries.counter_status(spec).value == 10
    services.record_service_event(
        instrument=lab6,
        kind=ServiceKind.PART_REPLACEMENT,
        part="chamber-door-seal",
        performed_at=at(2, 12),
        by=facility.manager,
    )
    # Replaced on day 2 at noon: 2 + 4 = 6 vent cycles since.
    status = queries.counter_status(spec)
    assert status.value == 6
    assert status.share == pytest.approx(6 / 500)


def test_a_session_across_a_boundary_counts_in_proportion(facility, lab6):
    # 10:00–14:00, 3 beam-on hours, 2 vents; the window ends at 11:00, a quarter of the session.
    add_session(facility, lab6, at(1, 10), 4, beam=3, vents=2)
    end = at(1, 11)
    assert use_between(lab6.pk, BEAM_ON, None, end) == pytest.approx(0.75)  # 3 × 1/4
    assert use_between(lab6.pk, VENTS, None, end) == pytest.approx(0.5)  # 2 × 1/4
    assert use_between(lab6.pk, CHAMBER, at(1, 12), at(2)) == pytest.approx(2.0)  # 12:00–14:00
    # Whole session inside: summed by the database as it is.
    assert use_between(lab6.pk, CHAMBER, at(1), at(2)) == pytest.approx(4.0)


def test_instrument_without_emitter_has_only_pump_counters(facility):
    coater = f.InstrumentFactory(code="coater", kind="coater", emitter_type=EmitterType.NONE)
    pump = f.PumpFactory(instrument=coater, name="rotary", kind="rotary")
    specs = queries.counter_specs(coater)
    assert specs == [CounterSpec(coater, Counter.PUMP_HOURS, pump=pump)]


def test_counting_without_a_recorded_start_says_so(facility, clock, week_of_sessions):
    status = queries.counter_status(CounterSpec(week_of_sessions, Counter.EMITTER_HOURS))
    # No emitter change and no reading: counted from the first logbook entry, flagged as such.
    assert status.since == at(1, 9)
    assert not status.since_known


def test_series_agrees_with_the_database_aggregate(facility, clock, week_of_sessions):
    # The chart series prorates sessions read once; value_at sums in the database. Every
    # three hours over the week, across a reading taken mid-session and an emitter change,
    # both must give the same figure.
    lab6 = week_of_sessions
    services.record_meter_reading(
        instrument=lab6,
        counter=Counter.EMITTER_HOURS,
        value=30,
        read_at=at(1, 11),
        by=facility.manager,
    )
    services.record_service_event(
        instrument=lab6, kind=ServiceKind.EMITTER_CHANGE, performed_at=at(3, 8), by=facility.manager
    )
    timeline = Timeline(CounterSpec(lab6, Counter.EMITTER_HOURS))
    points = [at(0, 3 * k) for k in range(48)]
    series = timeline.series(points)
    assert [v for _, v in series] == pytest.approx([timeline.value_at(t) for t in points])
    # Spot check by hand: day 2 at 12:00 = 30 (reading at 11:00 on day 1, session 09:00–13:00
    # with 3.5 beam-on h: 2 of its 4 h come after the reading) + 3.5 × 2/4 + 1.25 (day 2)
    # = 30 + 1.75 + 1.25 = 33.
    assert dict(series)[at(2, 12)] == pytest.approx(33.0)
