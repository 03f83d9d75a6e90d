"""The finder's digest: ranking from it equals the score's definition computed the slow way,
and it follows the logbook (new, edited, detached and late-committed rows)."""

from __future__ import annotations

import datetime as dt
import math
import random

import pytest
from django.utils import timezone

from facility.finder import digest, queries, text
from facility.finder.criteria import WEIGHTS, Criteria, make_criteria
from facility.finder.queries import search
from facility.logbook.models import InstrumentSession, Specimen
from tests import factories as f

CLASSES = {
    "polymer": ("insulating", ["PVDF membrane", "polystyrene beads", "nylon mesh"]),
    "ceramic": ("insulating", ["porous alumina", "zirconia", "glass fibre"]),
    "metal": ("conducting", ["steel powder", "copper foil"]),
    "semiconductor": ("semiconducting", ["silicon wafer", "ZnO rods"]),
}
FORMS = ["powder", "bulk", "thin_film", "fibre", "membrane"]


@pytest.fixture
def mixed_logbook(facility):
    """60 closed sessions with seeded random specimens, coatings and vacuum modes, in three
    groups' accounts (the client's group shares nothing but counts in summaries)."""
    rng = random.Random(4)
    accounts = [facility.account_a, facility.account_b, facility.client_account]
    users = [facility.researcher_a, facility.researcher_b, facility.client]
    start = timezone.now() - dt.timedelta(days=90)
    for n in range(60):
        klass = rng.choice(list(CLASSES))
        conductivity, materials = CLASSES[klass]
        k = rng.randrange(3)
        specimen = f.SpecimenFactory(
            name=f"sample {n}",
            material=rng.choice(materials),
            material_class=klass,
            conductivity=conductivity,
            form=rng.choice(FORMS),
            feature_size_nm=None if rng.random() < 0.15 else 10 ** rng.uniform(0.5, 4),
            preparation=rng.choice(["dried", "mounted on carbon tape", "cryo-fractured"]),
            owner=users[k],
            group=accounts[k].group,
        )
        coating = None
        if rng.random() < 0.5:
            coating = f.CoatingFactory(
                specimen=specimen, material=rng.choice(["Au", "C"]), thickness_nm=5
            )
        f.InstrumentSessionFactory(
            instrument=facility.sem,
            operator=users[k],
            account=accounts[k],
            specimen=specimen,
            coating=coating,
            vacuum_mode=rng.choice(["high", "low"]),
            started_at=start + dt.timedelta(hours=7 * n),
        )


def _slow_ranking(user, c: Criteria, limit: int) -> list[tuple[int, float]]:
    """The score as criteria.WEIGHTS defines it, session by session, over the finder's pool."""
    mine = set(queries.group_ids_of(user))
    pool = list(queries._pool(user, mine).select_related("specimen", "coating", "instrument"))
    relevance = text.relevance_of([s.specimen_id for s in pool], c.text) if c.text else {}
    scored = []
    for s in pool:
        sp = s.specimen
        strong = [n for n in ("material_class", "conductivity", "form") if getattr(c, n)]
        if strong and not any(getattr(sp, n) == getattr(c, n) for n in strong):
            continue
        score = sum(
            WEIGHTS[n] for n in [*strong, "beam_sensitive"] if getattr(c, n) == getattr(sp, n)
        )
        if c.vacuum_mode and s.vacuum_mode == c.vacuum_mode:
            score += WEIGHTS["vacuum_mode"]
        if c.instrument_kind and s.instrument.kind == c.instrument_kind:
            score += WEIGHTS["instrument_kind"]
        if c.coating and (s.coating.material if s.coating else "none") == c.coating:
            score += WEIGHTS["coating"]
        if c.feature_size_nm and sp.feature_size_nm:
            decades = abs(math.log10(sp.feature_size_nm / c.feature_size_nm))
            score += WEIGHTS["feature_size_nm"] * max(0.0, 1.0 - decades)
        score += WEIGHTS["text"] * min(1.0, relevance.get(sp.pk, 0.0))
        if score > 0:
            scored.append((s.pk, score, s.started_at))
    scored.sort(key=lambda t: (-round(t[1], 9), -t[2].timestamp()))
    return [(pk, score) for pk, score, _ in scored[:limit]]


QUERIES = [
    dict(material_class="polymer", conductivity="insulating", form="membrane", coating="none"),
    dict(material_class="ceramic", feature_size_nm=300, vacuum_mode="low"),
    dict(conductivity="insulating", form="fibre", feature_size_nm=20, coating="Au"),
    dict(material_class="metal", text="copper"),
    dict(material_class="polymer", form="powder", text="carbon tape"),
    dict(conductivity="insulating", text="alumina", instrument_kind="SEM"),
    dict(text="steel"),
    dict(text="beads dried"),
]


@pytest.mark.parametrize("limit", [1, 3, 10, 200])
@pytest.mark.parametrize("query", QUERIES)
def test_ranking_equals_the_score_computed_session_by_session(
    facility, mixed_logbook, limit, query
):
    c = make_criteria(**query)
    for user in (facility.researcher_a, facility.client, facility.manager):
        mine = set(queries.group_ids_of(user))
        fast = queries._ranked_ids(user, c, limit, mine)
        slow = _slow_ranking(user, c, limit)
        assert [round(s, 9) for _, s in fast] == [round(s, 9) for _, s in slow], user
        assert [pk for pk, _ in fast] == [pk for pk, _ in slow], user


def test_text_candidates_are_pruned_without_changing_the_answer(
    facility, mixed_logbook, monkeypatch
):
    # With attributes and text, relevance is asked only for sessions that could still make
    # the list; forcing the "too many candidates" branch must give the same first hits when
    # every specimen fits in it.
    c = make_criteria(material_class="polymer", form="powder", text="carbon tape")
    mine = set(queries.group_ids_of(facility.researcher_a))
    pruned = queries._ranked_ids(facility.researcher_a, c, 5, mine)
    monkeypatch.setattr(queries, "TEXT_CANDIDATES", 0)
    monkeypatch.setattr(text, "best_matches", lambda t, n: text.relevance_of(_all_specimens(), t))
    wide = queries._ranked_ids(facility.researcher_a, c, 5, mine)
    assert pruned == wide


def _all_specimens() -> list[int]:
    return list(Specimen.objects.values_list("pk", flat=True))


def _hit_ids(user, **query) -> list[int]:
    return [h.session_id for h in search(user, make_criteria(**query)).hits]


def _first(user, **query) -> int | None:
    """The best hit if it is a mineral powder like QUERY's (score 8; nothing else in the
    mixed logbook reaches more than 5), else None."""
    hits = search(user, make_criteria(**query)).hits
    return hits[0].session_id if hits and hits[0].score >= 8 else None


QUERY = dict(material_class="mineral", conductivity="insulating", form="powder")


def _mineral_session(facility, **session) -> InstrumentSession:
    specimen = f.SpecimenFactory(
        name="calcite",
        material="calcite crystals",
        material_class="mineral",
        conductivity="insulating",
        form="powder",
        owner=facility.researcher_a,
        group=facility.account_a.group,
    )
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        specimen=specimen,
        **session,
    )


def test_new_and_edited_rows_are_seen_by_the_next_search(facility, mixed_logbook):
    assert _first(facility.researcher_a, **QUERY) is None  # loads the digest
    session = _mineral_session(facility)
    assert _first(facility.researcher_a, **QUERY) == session.pk
    # an edited specimen: no longer a mineral powder
    specimen = session.specimen
    specimen.material_class, specimen.conductivity, specimen.form = "metal", "conducting", "bulk"
    specimen.save()
    assert session.pk not in _hit_ids(facility.researcher_a, **QUERY)
    # a coating added to the session counts for the coating criterion
    specimen.material_class, specimen.conductivity, specimen.form = (
        "mineral",
        "insulating",
        "powder",
    )
    specimen.save()
    coat = f.CoatingFactory(specimen=specimen, material="C", thickness_nm=10)
    session.coating = coat
    session.save()
    result = search(facility.researcher_a, make_criteria(**QUERY, coating="C"))
    assert result.hits[0].session_id == session.pk
    assert result.hits[0].score == pytest.approx(3 + 3 + 2 + 1)


def test_an_open_session_is_left_out_until_it_is_closed(facility, mixed_logbook):
    _first(facility.researcher_a, **QUERY)
    session = _mineral_session(facility, ended_at=None, beam_on_hours=None)
    assert _first(facility.researcher_a, **QUERY) is None
    session.ended_at = session.started_at + dt.timedelta(hours=1)
    session.save()
    assert _first(facility.researcher_a, **QUERY) == session.pk


def test_a_detached_specimen_drops_the_session(facility, mixed_logbook):
    session = _mineral_session(facility)
    assert _first(facility.researcher_a, **QUERY) == session.pk
    # Deleting the specimen detaches it from the session by a bulk update: no timestamp moves,
    # so the digest still ranks the session; the fresh read finds it gone and it is forgotten.
    session.specimen.delete()
    assert session.pk not in _hit_ids(facility.researcher_a, **QUERY)
    table = digest.current().table()
    assert session.pk not in set(table.session_id[table.alive].tolist())


def test_a_late_commit_is_caught_by_the_recheck(facility, mixed_logbook, monkeypatch):
    _first(facility.researcher_a, **QUERY)
    session = _mineral_session(facility)
    _first(facility.researcher_a, **QUERY)  # the digest has now seen this moment
    late = _mineral_session(facility)
    # as if its transaction had begun (and stamped the row) five minutes ago
    five_ago = timezone.now() - dt.timedelta(minutes=5)
    InstrumentSession.objects.filter(pk=late.pk).update(updated_at=five_ago)
    Specimen.objects.filter(pk=late.specimen_id).update(updated_at=five_ago)
    assert late.pk not in _hit_ids(facility.researcher_a, **QUERY)  # between rechecks
    monkeypatch.setattr(digest, "RECHECK_SECONDS", 0.0)
    assert set(_hit_ids(facility.researcher_a, **QUERY)[:2]) == {session.pk, late.pk}


def test_the_digest_reloads_whole_after_a_while(facility, mixed_logbook, monkeypatch):
    table = digest.current().table()
    assert digest.current().table() is table  # nothing changed: the same snapshot
    monkeypatch.setattr(digest, "RELOAD_SECONDS", 0.0)
    reloaded = digest.current().table()
    assert reloaded is not table
    assert sorted(reloaded.session_id.tolist()) == sorted(table.session_id.tolist())
