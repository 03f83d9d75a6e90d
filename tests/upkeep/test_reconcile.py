"""Meter readings: the reading wins from its date on, and the drift against the logbook is shown."""

from __future__ import annotations

import pytest

from facility.upkeep import queries, services
from facility.upkeep.models import Counter, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import add_session, at


def _read(facility, instrument, when, value, pump=None):
    return services.record_meter_reading(
        instrument=instrument,
        counter=Counter.PUMP_HOURS if pump else Counter.EMITTER_HOURS,
        pump=pump,
        value=value,
        read_at=when,
        by=facility.manager,
    )


def test_reading_wins_from_its_date_and_drift_is_shown(facility, clock, lab6):
    add_session(facility, lab6, at(1, 9), 10, beam=10)
    add_session(facility, lab6, at(2, 9), 6, beam=6)
    _read(facility, lab6, at(3, 8), "20.00")
    add_session(facility, lab6, at(4, 9), 5, beam=5)
    spec = queries.spec_for(lab6, Counter.EMITTER_HOURS)

    status = queries.counter_status(spec)
    # Logbook alone: 10 + 6 + 5 = 21 h. The meter read 20 h on day 3 where the logbook had
    # 10 + 6 = 16 h (drift +4 h); from then on: 20 + 5 = 25 h.
    assert status.derived_value == pytest.approx(21.0)
    assert status.value == pytest.approx(25.0)
    assert status.drift == pytest.approx(4.0)
    [check] = queries.reconciliation(spec)
    assert check.predicted == pytest.approx(16.0)
    assert check.drift == pytest.approx(4.0)
    assert status.anchor.kind == "reading"

    # A second reading on day 5 of 24 h, where the first reading plus day 4 predicted 25 h.
    _read(facility, lab6, at(5, 8), 24)
    add_session(facility, lab6, at(6, 9), 2, beam=1.5)
    first, second = queries.reconciliation(spec)
    assert first.drift == pytest.approx(4.0)  # unchanged by the later reading
    assert second.predicted == pytest.approx(25.0)
    assert second.drift == pytest.approx(-1.0)
    # Now 24 + 1.5 = 25.5 h; the derived value 21 + 1.5 = 22.5 h; readings corrected +3 h.
    status = queries.counter_status(spec)
    assert status.value == pytest.approx(25.5)
    assert status.drift == pytest.approx(3.0)


def test_reading_taken_during_a_session_counts_the_rest_of_it(facility, clock, lab6):
    # Session 10:00–14:00 with 4 beam-on hours; the meter is read at 12:00, half way through.
    add_session(facility, lab6, at(1, 10), 4, beam=4)
    _read(facility, lab6, at(1, 12), 50)
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS))
    # 50 + 4 × 2/4 = 52 h; the logbook predicted 4 × 2/4 = 2 h at 12:00 (drift +48 h).
    assert status.value == pytest.approx(52.0)
    assert status.readings[0].predicted == pytest.approx(2.0)


def test_reading_before_the_logbook_starts_is_kept(facility, clock, lab6):
    # The facility read the meter (300 h) on day 0 and started logging sessions on day 1.
    _read(facility, lab6, at(0, 12), 300)
    add_session(facility, lab6, at(1, 9), 3, beam=2.5)
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS))
    # 300 + 2.5 = 302.5 h, counted from a known start.
    assert status.value == pytest.approx(302.5)
    assert status.since_known


def test_reading_of_the_old_part_is_ignored_after_a_reset(facility, clock, lab6):
    add_session(facility, lab6, at(1, 9), 8, beam=8)
    _read(facility, lab6, at(2, 8), 900)
    services.record_service_event(
        instrument=lab6, kind=ServiceKind.EMITTER_CHANGE, performed_at=at(3), by=facility.manager
    )
    add_session(facility, lab6, at(4, 9), 3, beam=3)
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS))
    # New emitter from day 3: only the 3 h since; the 900 h reading was of the old one.
    assert status.value == pytest.approx(3.0)
    assert status.anchor.kind == "reset"


def test_pump_reading_for_a_continuous_pump(facility, clock):
    turbo = f.PumpFactory(
        instrument=facility.sem, name="turbo", runs_continuously=True, installed_on=at().date()
    )
    _read(facility, facility.sem, at(50), 15000, pump=turbo)
    status = queries.counter_status(queries.spec_for(facility.sem, Counter.PUMP_HOURS, pump=turbo))
    # Calendar from the reading: 15000 + 10 days × 24 = 15240 h; the logbook alone says
    # 60 days × 24 = 1440 h since installation.
    assert status.value == pytest.approx(15240.0)
    assert status.derived_value == pytest.approx(1440.0)
    assert status.readings[0].drift == pytest.approx(15000 - 50 * 24)
