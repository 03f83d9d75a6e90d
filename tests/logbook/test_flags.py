"""Session flags from settings (before any image), their remedies, and dismissals."""

from __future__ import annotations

import pytest

from facility.errors import Invalid, NotAllowed
from facility.logbook import flags
from facility.logbook.models import Flag
from facility.logbook.services import add_conditions, record_specimen, set_coating, update_session
from tests import factories as f


@pytest.fixture
def session(facility):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        ended_at=None,
        beam_on_hours=None,
    )


def _polymer(session, by, **extra):
    return record_specimen(
        session=session,
        by=by,
        name="PCL membrane",
        material="polycaprolactone",
        material_class="polymer",
        conductivity="insulating",
        form="membrane",
        **extra,
    )


def test_uncoated_insulator_above_e2_in_high_vacuum_is_a_charging_risk(session, facility):
    _polymer(session, facility.researcher_a)
    set_coating(session=session, by=facility.researcher_a, material="none")
    add_conditions(
        session=session,
        by=facility.researcher_a,
        accelerating_voltage_kv=15,
        working_distance_mm=10,
        probe_current_na=0.4,
        dwell_time_us=10,
    )
    flag = session.flags.get(code="charging_risk")
    # Default E2 for polymers ~1.5 keV (DOMAIN.md after Joy & Joy 1996).
    assert "15 kV above E2 ≈ 1.5 keV" in flag.message
    text = " ".join(flag.remedies)
    assert "from 15 kV" in text
    assert "Au/Pd" in text
    assert "low-vacuum" in text  # the test instrument offers low vacuum
    assert "below 0.4 nA" in text
    assert "than 10 µs" in text
    assert "conductive tape" in text


def test_no_risk_when_coated_or_below_e2_or_in_low_vacuum(session, facility):
    _polymer(session, facility.researcher_a)
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=1.0)
    assert not session.flags.filter(code="charging_risk").exists()  # 1 kV ≤ E2
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=10)
    assert session.flags.filter(code="charging_risk").exists()
    update_session(session=session, by=facility.researcher_a, vacuum_mode="low")
    assert not session.flags.filter(code="charging_risk").exists()
    update_session(session=session, by=facility.researcher_a, vacuum_mode="high")
    set_coating(session=session, by=facility.researcher_a, material="Au-Pd", thickness_nm=6)
    assert not session.flags.filter(code="charging_risk").exists()


def test_the_specimens_own_e2_wins_over_the_default(session, facility):
    # Kapton E2 ≈ 0.4 keV (DOMAIN.md after Joy & Joy 1996): 1 kV is already above it.
    _polymer(session, facility.researcher_a, e2_kev=0.4)
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=1.0)
    flag = session.flags.get(code="charging_risk")
    assert flag.evidence["e2_source"] == "specimen"


def test_conducting_specimen_has_no_charging_risk(session, facility):
    record_specimen(
        session=session,
        by=facility.researcher_a,
        name="steel powder",
        material="316L",
        material_class="metal",
        conductivity="conducting",
        form="powder",
    )
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=20)
    assert not session.flags.exists()


def test_coating_thick_against_feature_size_warns(session, facility):
    # A ~10 nm sputtered layer hides features of that size (trade): 10 nm on 30 nm pores warns,
    # 3 nm does not (threshold 0.2 × feature size, a setting).
    _polymer(session, facility.researcher_a, feature_size_nm=30)
    set_coating(session=session, by=facility.researcher_a, material="Au", thickness_nm=10)
    flag = session.flags.get(code="coating_hides_features")
    assert "at most about 6 nm" in " ".join(flag.remedies)
    set_coating(session=session, by=facility.researcher_a, material="Pt", thickness_nm=3)
    assert not session.flags.filter(code="coating_hides_features").exists()


def test_dismissed_flag_stays_dismissed_when_recomputed(session, facility):
    _polymer(session, facility.researcher_a)
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=10)
    flag = session.flags.get(code="charging_risk")
    with pytest.raises(Invalid, match="Say why"):
        flags.dismiss(flag=flag, by=facility.researcher_a, reason="  ")
    with pytest.raises(NotAllowed):
        flags.dismiss(flag=flag, by=facility.researcher_b, reason="not mine")
    flags.dismiss(flag=flag, by=facility.researcher_a, reason="low-dose survey only")
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=12)
    flag = Flag.objects.get(pk=flag.pk)
    assert flag.is_dismissed
    assert flag.dismissed_by == facility.researcher_a
    assert flag.dismiss_reason == "low-dose survey only"
    assert "12 kV" in flag.message  # recomputed in place
    assert session.flags.filter(code="charging_risk").count() == 1
