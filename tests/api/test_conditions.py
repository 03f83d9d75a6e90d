"""The conditions finder through the API (issue 8): same answer as the finder, its privacy rules
kept, and a commercial client's session never showing its details to anyone else.

The constructed logbook, on the seeded world: four closed sessions on uncoated-or-coated polymer
membranes — group A's (Au-coated, 2 kV, worked), group B's (uncoated, 3 kV, worked; B shares its
details), and two of the commercial client's (uncoated: 10 kV charging, 1.5 kV worked). The
client's group shares no details but lets its sessions count in the anonymised summary.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from api import tokens
from facility.finder.criteria import make_criteria
from facility.finder.queries import search
from facility.logbook.models import Conditions, Flag
from tests import factories as f
from tests.api.conftest import NOW, World, small_tiff, store_micrograph

SEARCH = "/api/v1/conditions/search/"
MEMBRANE = {"material_class": "polymer", "conductivity": "insulating", "form": "membrane"}
CLIENT_SPECIMEN = "Quillfen barrier film QF-7"


def _closed(world: World, n: int, *, user, account, kv: float, coating=None, charging=False):
    specimen = f.SpecimenFactory(
        owner=user,
        group=account.group,
        name=CLIENT_SPECIMEN if account.group == world.facility.client_group else f"membrane {n}",
        material="PVDF membrane",
        material_class="polymer",
        conductivity="insulating",
        form="membrane",
        feature_size_nm=50,
    )
    session = f.InstrumentSessionFactory(
        instrument=world.facility.sem,
        operator=user,
        account=account,
        specimen=specimen,
        coating=f.CoatingFactory(specimen=specimen, material=coating[0], thickness_nm=coating[1])
        if coating
        else None,
        vacuum_mode="high",
        started_at=NOW - dt.timedelta(days=30 - n),
    )
    Conditions.objects.create(
        session=session, accelerating_voltage_kv=kv, working_distance_mm=5.0, detector="SE"
    )
    micrograph = store_micrograph(session, user, small_tiff(40 + n), f"m{n}.tif")
    if charging:
        Flag.objects.create(
            session=session, code="charging", severity="problem", message="Charging."
        )
    return session, micrograph


@pytest.fixture
def logbook(world):
    fa = world.facility
    made = {
        "a": _closed(world, 1, user=fa.researcher_a, account=fa.account_a, kv=2, coating=("Au", 8)),
        "b": _closed(world, 2, user=fa.researcher_b, account=fa.account_b, kv=3),
        "c_charging": _closed(
            world, 3, user=fa.client, account=fa.client_account, kv=10, charging=True
        ),
        "c_worked": _closed(world, 4, user=fa.client, account=fa.client_account, kv=1.5),
    }
    return {name: {"session": s, "micrograph": m} for name, (s, m) in made.items()}


def _hits_by_kv(body: dict) -> dict[float, dict]:
    return {hit["conditions"][0]["accelerating_voltage_kv"]: hit for hit in body["hits"]}


def test_summary_figures_and_failures(world, logbook):
    body = world.client_for("researcher_a").get(SEARCH, MEMBRANE).json()
    summary = body["summary"]
    # All four score the full 3 + 3 + 2 of the three attributes given: all similar, all
    # analysed; three unflagged. Voltages that worked: 1.5, 2, 3 kV — median 2 (by hand).
    assert (summary["similar"], summary["worked"], summary["failed"]) == (4, 3, 1)
    assert summary["settings"]["accelerating_voltage_kv"] == {
        "median": 2.0,
        "min": 1.5,
        "max": 3.0,
        "count": 3,
    }
    assert summary["settings"]["coating"] == [
        {"value": "uncoated", "count": 2},
        {"value": "Au", "count": 1},
    ]
    assert summary["settings"]["detector"] == [{"value": "SE", "count": 3}]
    # The one charging case: uncoated, high vacuum, 10 kV — above the 3 kV that worked.
    assert summary["failures"] == [
        "1 of 1 charging cases were uncoated, in high vacuum and above 3 kV."
    ]
    assert body["suggestion"] == {
        "accelerating_voltage_kv": 2.0,
        "working_distance_mm": 5.0,
        "probe_current_na": None,
        "detector": "SE",
        "vacuum_mode": "high",
    }
    assert body["criteria"]["material_class"] == "polymer"


def test_a_commercial_clients_hits_show_no_details_to_others(world, logbook):
    client_sessions = {logbook["c_charging"]["session"].pk, logbook["c_worked"]["session"].pk}
    for role in ("researcher_a", "researcher_b", "leader_a"):
        body = world.client_for(role).get(SEARCH, MEMBRANE).json()
        hits = _hits_by_kv(body)
        assert set(hits) == {1.5, 2.0, 3.0, 10.0}, role
        for kv in (1.5, 10.0):
            hit = hits[kv]
            assert hit["visible"] is False, role
            assert hit["micrographs"] == [], role
            for name in ("session", "session_url", "date", "instrument", "specimen", "material"):
                assert hit[name] is None, (role, name)
            assert hit["operator"] is None and hit["group"] is None, role
            # Its conditions and outcome still show, anonymised.
            assert hit["outcome"] == ("charging" if kv == 10.0 else "worked")
        text = json.dumps(body)
        for mark in (CLIENT_SPECIMEN, "cyd.client", world.facility.client_group.name):
            assert mark not in text, (role, mark)
        ids = [h["session"] for h in body["hits"]]
        assert not client_sessions & set(ids), role
        # Nor can its images be had by id.
        api = world.client_for(role)
        for key in ("c_charging", "c_worked"):
            pk = logbook[key]["micrograph"].pk
            assert api.get(f"/api/v1/conditions/thumbnails/{pk}/").status_code == 404, role


def test_the_client_and_staff_see_the_clients_details(world, logbook):
    for role in ("client", "staff"):
        api = world.client_for(role)
        hit = _hits_by_kv(api.get(SEARCH, MEMBRANE).json())[1.5]
        assert hit["visible"] is True and hit["specimen"] == CLIENT_SPECIMEN, role
        assert hit["session"] == logbook["c_worked"]["session"].pk
        [image] = hit["micrographs"]
        assert image["id"] == logbook["c_worked"]["micrograph"].pk
        thumb = api.get(image["thumbnail_url"])
        assert thumb.status_code == 200 and thumb["Content-Type"] == "image/png", role
        # The PNG signature (ISO/IEC 15948 §5.2).
        assert b"".join(thumb.streaming_content)[:8] == b"\x89PNG\r\n\x1a\n"


def test_own_and_shared_hits(world, logbook):
    api = world.client_for("researcher_a")
    hits = _hits_by_kv(api.get(SEARCH, MEMBRANE).json())
    own, shared = hits[2.0], hits[3.0]
    # Own group's hit: details, and a link to the session in the API that opens.
    assert own["visible"] and own["group"] == world.facility.group_a.name
    assert own["session_url"] == f"/api/v1/sessions/{logbook['a']['session'].pk}/"
    assert api.get(own["session_url"]).status_code == 200
    # Group B shares its details: shown, with images, but its session stays B's.
    assert shared["visible"] and shared["specimen"] == "membrane 2"
    assert shared["session_url"] is None
    b_image = logbook["b"]["micrograph"].pk
    assert [m["id"] for m in shared["micrographs"]] == [b_image]
    assert api.get(shared["micrographs"][0]["thumbnail_url"]).status_code == 200
    assert api.get(f"/api/v1/micrographs/{b_image}/thumbnail/").status_code == 404


def test_a_group_that_does_not_count_is_left_out_for_others(world, logbook):
    fa = world.facility
    fa.client_group.counts_in_summaries = False
    fa.client_group.save()
    mine = world.client_for("researcher_a").get(SEARCH, MEMBRANE).json()
    assert mine["summary"]["similar"] == 2 and set(_hits_by_kv(mine)) == {2.0, 3.0}
    # The client's own sessions still inform the client.
    theirs = world.client_for("client").get(SEARCH, MEMBRANE).json()
    assert theirs["summary"]["similar"] == 4


def test_the_answer_is_the_finders(world, logbook):
    """The API adds nothing and drops nothing of what facility.finder.queries.search says."""
    user = world.facility.leader_a
    result = search(user, make_criteria(**MEMBRANE, text="PVDF"), limit=20)
    api = world.client_for("leader_a")
    body = api.get(SEARCH, {**MEMBRANE, "text": "PVDF"}).json()
    assert body["summary"]["similar"] == result.summary.similar
    assert body["summary"]["failures"] == result.summary.failures
    expected = [dataclasses.asdict(h) for h in result.hits]
    for got, want in zip(body["hits"], expected, strict=True):
        assert got["score"] == want["score"] and got["reasons"] == want["reasons"]
        assert got["visible"] == want["visible"]
        assert [m["id"] for m in got["micrographs"]] == want["micrograph_ids"]


def test_get_and_post_agree_and_the_slashless_path_redirects(world, logbook):
    api = world.client_for("researcher_b")
    by_get = api.get(SEARCH, {**MEMBRANE, "feature_size_nm": "45", "limit": "2"})
    by_post = api.post(SEARCH, {**MEMBRANE, "feature_size_nm": 45, "limit": 2}, format="json")
    assert by_get.status_code == by_post.status_code == 200
    assert by_get.json() == by_post.json()
    assert len(by_get.json()["hits"]) == 2
    moved = api.get("/api/v1/conditions/search?material_class=polymer")
    # 308 keeps the method and body (RFC 9110 §15.4.9).
    assert moved.status_code == 308
    assert moved["Location"] == "/api/v1/conditions/search/?material_class=polymer"


def test_a_read_token_may_post_a_search(world, logbook):
    api = world.client_for("anonymous")
    api.credentials(HTTP_AUTHORIZATION=f"Bearer {world.a.secret}")  # read scope only
    assert api.post(SEARCH, MEMBRANE, format="json").status_code == 200


@pytest.mark.parametrize(
    ("params", "field"),
    [
        ({}, None),
        ({"material_class": "plastic"}, "material_class"),
        ({"feature_size_nm": "0"}, "feature_size_nm"),
        ({"text": "x" * 301}, "text"),
        ({"material_class": "polymer", "limit": "0"}, "limit"),
    ],
)
def test_bad_criteria_are_400_in_the_one_format(world, params, field):
    response = world.client_for("researcher_a").get(SEARCH, params)
    assert response.status_code == 400
    error = response.json()["error"]
    assert error["code"] == "invalid" and error["message"]
    if field:
        assert field in error["fields"]


def test_an_instrument_bound_token_sees_only_that_instruments_details(world, logbook):
    issued = tokens.create_token(
        user=world.facility.researcher_a,
        name="vp only",
        scopes=["read"],
        instrument=world.b.instrument,
    )
    api = world.client_for("anonymous")
    api.credentials(HTTP_AUTHORIZATION=f"Bearer {issued.secret}")
    own = _hits_by_kv(api.get(SEARCH, MEMBRANE).json())[2.0]
    assert own["visible"] is False and own["session"] is None and own["micrographs"] == []
    pk = logbook["a"]["micrograph"].pk
    assert api.get(f"/api/v1/conditions/thumbnails/{pk}/").status_code == 404


def test_search_queries_do_not_grow_with_hits(world, logbook):
    api = world.client_for("researcher_a")

    def queries() -> int:
        with CaptureQueriesContext(connection) as ctx:
            assert api.get(SEARCH, MEMBRANE).status_code == 200
        return len(ctx.captured_queries)

    before = queries()
    fa = world.facility
    for n in range(5, 11):
        _closed(world, n, user=fa.researcher_b, account=fa.account_b, kv=4)
    assert len(api.get(SEARCH, MEMBRANE).json()["hits"]) == 10
    assert queries() == before
