"""The finder on a constructed logbook: the expected hits in order, hand-computed summaries,
and the privacy rules."""

from __future__ import annotations

import datetime as dt
import math

import pytest
from django.utils import timezone

from facility.errors import Invalid
from facility.finder.criteria import make_criteria
from facility.finder.queries import search
from facility.logbook.models import Conditions, Flag, Micrograph
from tests import factories as f

START = timezone.now() - dt.timedelta(days=60)


def _session(
    fac,
    n,
    *,
    user,
    account,
    material_class,
    conductivity,
    form,
    feature,
    coating,
    vacuum,
    kv,
    wd=None,
    charging=False,
    analysed=True,
    material="membrane polymer",
):
    specimen = f.SpecimenFactory(
        name=f"specimen {n}",
        material=material,
        material_class=material_class,
        conductivity=conductivity,
        form=form,
        feature_size_nm=feature,
        owner=user,
        group=account.group,
    )
    coat = None
    if coating:
        coat = f.CoatingFactory(specimen=specimen, material=coating[0], thickness_nm=coating[1])
    session = f.InstrumentSessionFactory(
        instrument=fac.sem,
        operator=user,
        account=account,
        specimen=specimen,
        coating=coat,
        vacuum_mode=vacuum,
        started_at=START + dt.timedelta(days=n),
    )
    Conditions.objects.create(session=session, accelerating_voltage_kv=kv, working_distance_mm=wd)
    if analysed:
        Micrograph.objects.create(session=session, sha256=f"{n:064d}", state="done")
    if charging:
        Flag.objects.create(session=session, code="charging", severity="problem", message="x")
    return session


@pytest.fixture
def logbook(facility):
    fa = facility
    polymer = dict(material_class="polymer", conductivity="insulating")
    s = {}
    s[1] = _session(
        fa,
        10,
        user=fa.researcher_b,
        account=fa.account_b,
        form="membrane",
        feature=50,
        coating=None,
        vacuum="high",
        kv=15,
        charging=True,
        **polymer,
    )
    s[2] = _session(
        fa,
        11,
        user=fa.researcher_b,
        account=fa.account_b,
        form="membrane",
        feature=40,
        coating=None,
        vacuum="high",
        kv=10,
        charging=True,
        **polymer,
    )
    s[3] = _session(
        fa,
        12,
        user=fa.researcher_b,
        account=fa.account_b,
        form="membrane",
        feature=60,
        coating=("Au-Pd", 5),
        vacuum="high",
        kv=2,
        **polymer,
    )
    s[4] = _session(
        fa,
        13,
        user=fa.researcher_a,
        account=fa.account_a,
        form="fibre",
        feature=300,
        coating=None,
        vacuum="low",
        kv=5,
        wd=8,
        **polymer,
    )
    s[5] = _session(
        fa,
        5,
        user=fa.client,
        account=fa.client_account,
        form="membrane",
        feature=50,
        coating=None,
        vacuum="low",
        kv=3,
        **polymer,
    )
    s[6] = _session(
        fa,
        14,
        user=fa.researcher_a,
        account=fa.account_a,
        form="powder",
        feature=5000,
        coating=None,
        vacuum="high",
        kv=20,
        material_class="metal",
        conductivity="conducting",
        material="steel",
    )
    s[7] = _session(
        fa,
        15,
        user=fa.researcher_b,
        account=fa.account_b,
        form="membrane",
        feature=None,
        coating=None,
        vacuum="high",
        kv=1,
        **polymer,
    )
    return s


QUERY = dict(
    material_class="polymer",
    conductivity="insulating",
    form="membrane",
    feature_size_nm=50,
    coating="none",
)


def test_hits_in_the_expected_order_with_hand_computed_scores(facility, logbook):
    result = search(facility.researcher_a, make_criteria(**QUERY))
    order = [h.session_id for h in result.hits]
    s = logbook
    # Scores (weights: class 3, conductivity 3, form 2, feature 2 × (1 − |log10(size/50)|),
    # uncoated 1): #1 and #5 = 11 (newer first), #2 = 9 + 2 × (1 − log10(50/40)) = 10.806,
    # #3 = 8 + 2 × (1 − log10(60/50)) = 9.842 (coated: no coating point), #7 = 9 (no size),
    # #4 = 7 + 2 × (1 − log10(6)) = 7.444 (a fibre). The steel powder matches nothing.
    assert order == [s[1].pk, s[5].pk, s[2].pk, s[3].pk, s[7].pk, s[4].pk]
    scores = [h.score for h in result.hits]
    expected = [
        11,
        11,
        9 + 2 * (1 - math.log10(50 / 40)),
        8 + 2 * (1 - math.log10(1.2)),
        9,
        7 + 2 * (1 - math.log10(6)),
    ]
    assert scores == pytest.approx(expected, abs=1e-3)
    assert "also uncoated" in result.hits[0].reasons


def test_summary_of_what_worked_and_what_failed(facility, logbook):
    result = search(facility.researcher_a, make_criteria(**QUERY))
    summary = result.summary
    # Similar (≥ half of the best score 11): all six polymer sessions; analysed all; failed #1, #2.
    assert (summary.similar, summary.worked, summary.failed) == (6, 4, 2)
    kv = summary.settings["accelerating_voltage_kv"]
    # Worked voltages 2, 5, 3, 1 kV → median 2.5, range 1–5.
    assert (kv["median"], kv["min"], kv["max"], kv["count"]) == (2.5, 1, 5, 4)
    assert dict(summary.settings["vacuum_mode"]) == {"high": 2, "low": 2}
    assert dict(summary.settings["coating"]) == {"uncoated": 3, "Au-Pd": 1}
    assert summary.failures == [
        "2 of 2 charging cases were uncoated, in high vacuum and above 5 kV."
    ]
    assert result.suggestion["accelerating_voltage_kv"] == 2.5


def test_commercial_client_details_never_show_to_others(facility, logbook):
    result = search(facility.researcher_a, make_criteria(**QUERY))
    client_hit = next(h for h in result.hits if h.session_id == logbook[5].pk)
    assert not client_hit.visible
    assert client_hit.specimen is None and client_hit.operator is None and client_hit.group is None
    assert client_hit.micrograph_ids == []
    assert client_hit.conditions == [
        {"accelerating_voltage_kv": 3.0}
    ]  # conditions and outcome only
    assert client_hit.outcome == "worked"
    staff_view = search(facility.manager, make_criteria(**QUERY))
    assert next(h for h in staff_view.hits if h.session_id == logbook[5].pk).visible


def test_a_group_that_does_not_share_is_anonymised(facility, logbook):
    facility.group_b.shares_details = False
    facility.group_b.save()
    hits = search(facility.researcher_a, make_criteria(**QUERY)).hits
    b_hits = [h for h in hits if h.session_id in {logbook[1].pk, logbook[2].pk}]
    assert b_hits and not any(h.visible for h in b_hits)
    own = search(facility.researcher_b, make_criteria(**QUERY)).hits
    assert all(h.visible for h in own if h.session_id == logbook[1].pk)


def test_a_group_that_does_not_count_is_left_out_of_the_summary(facility, logbook):
    facility.client_group.counts_in_summaries = False
    facility.client_group.save()
    result = search(facility.researcher_a, make_criteria(**QUERY))
    assert logbook[5].pk not in [h.session_id for h in result.hits]
    assert result.summary.worked == 3  # #3, #4, #7
    # The client still sees their own session.
    own = search(facility.client, make_criteria(**QUERY))
    assert logbook[5].pk in [h.session_id for h in own.hits]


def test_dismissed_charging_counts_as_worked(facility, logbook):
    Flag.objects.filter(session=logbook[2]).update(
        dismissed_at=timezone.now(), dismissed_by=facility.manager, dismiss_reason="dust"
    )
    summary = search(facility.researcher_a, make_criteria(**QUERY)).summary
    assert (summary.worked, summary.failed) == (5, 1)


def test_free_text_finds_the_material(facility, logbook):
    result = search(facility.researcher_a, make_criteria(text="steel"))
    assert [h.session_id for h in result.hits] == [logbook[6].pk]
    assert "text matches: steel" in result.hits[0].reasons


@pytest.mark.parametrize(
    ("raw", "field"),
    [
        ({"material_class": "plasma"}, "material_class"),
        ({"feature_size_nm": "-3"}, "feature_size_nm"),
        ({"beam_sensitive": "perhaps"}, "beam_sensitive"),
    ],
)
def test_bad_criteria_are_refused(raw, field):
    with pytest.raises(Invalid) as caught:
        make_criteria(**raw)
    assert field in caught.value.fields


def test_empty_criteria_are_refused():
    with pytest.raises(Invalid, match="at least one attribute"):
        make_criteria()


def test_charging_report_counts_by_cell(facility, logbook, settings):
    from facility.finder.charging_report import charging_table, heat_map_svg
    from facility.logbook.models import Assessment
    from facility.micrograph.assess import ANALYSIS_VERSION

    threshold = settings.ANALYSIS_THRESHOLDS["charging_score"]
    for n, session in logbook.items():
        micrograph = session.micrographs.get()
        score = threshold + 0.2 if n in (1, 2) else threshold / 4
        Assessment.objects.create(
            micrograph=micrograph, analysis_version=ANALYSIS_VERSION, charging_score=score
        )
    cells = {(c.conductivity, c.coated, c.vacuum_mode, c.band): c for c in charging_table()}
    # #1 (15 kV) and #2 (10 kV): insulating, uncoated, high vacuum, band 10–20 kV, both charging.
    both = cells[("insulating", "uncoated", "high", "10–20 kV")]
    assert (both.sessions, both.charging, both.rate) == (2, 2, 1.0)
    # #7 (1 kV) in the same specimen class but below 2 kV: no charging.
    low = cells[("insulating", "uncoated", "high", "< 2 kV")]
    assert (low.sessions, low.charging) == (1, 0)
    assert sum(c.sessions for c in cells.values()) == 7
    svg = heat_map_svg(list(cells.values()))
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg
