"""The finder's digest: ranking from it equals the score's definition computed the slow way,
and it follows the logbook (new, edited, detached and late-committed rows)."""

from __future__ import annotations

import datetime as dt
import math
import random

import numpy as np
import pytest
from django.db import connection
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


def _relevance(specimen_ids: list[int], words: str) -> dict[int, float]:
    """The definition of text relevance (facility/finder/text.py) in one query, written apart
    from the finder's two-part computation: on PostgreSQL the larger of ts_rank × 10 and the
    material name's trigram similarity, for a specimen whose document matches a word or whose
    name passes pg_trgm's threshold; elsewhere the share of the words found in its texts."""
    if connection.vendor != "postgresql":
        return text.document_rank(specimen_ids, words)
    query = " | ".join(text.tokens(words))
    sql = (
        "SELECT id, GREATEST(ts_rank(finder_document, to_tsquery('english', %(q)s)) * 10.0, "
        "similarity(material, %(t)s)) FROM logbook_specimen WHERE id = ANY(%(ids)s) AND "
        "(finder_document @@ to_tsquery('english', %(q)s) OR material %% %(t)s)"
    )
    with connection.cursor() as cursor:
        cursor.execute(sql, {"q": query, "t": words[:200], "ids": list(specimen_ids)})
        return {pk: float(rel) for pk, rel in cursor.fetchall()}


def _slow_ranking(user, c: Criteria, limit: int) -> list[tuple[int, float]]:
    """The score as criteria.WEIGHTS defines it, session by session, over the finder's pool."""
    mine = set(queries.group_ids_of(user))
    pool = list(queries._pool(user, mine).select_related("specimen", "coating", "instrument"))
    relevance = _relevance([s.specimen_id for s in pool], c.text) if c.text else {}
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


@pytest.mark.parametrize("first_chunk", [1, 4, 1000])
@pytest.mark.parametrize("probe", [True, False])
@pytest.mark.parametrize("query", [q for q in QUERIES if "text" in q and len(q) > 1])
def test_text_is_asked_in_chunks_without_changing_the_answer(
    facility, mixed_logbook, monkeypatch, first_chunk, probe, query
):
    # Relevance is asked first for the best by attributes, then either for every match in the
    # facility (when there are few) or in growing chunks: each path gives the slow answer.
    monkeypatch.setattr(queries, "FIRST_TEXT_CHUNK", first_chunk)
    if not probe:
        monkeypatch.setattr(text, "document_matches", lambda t, n: None)
    c = make_criteria(**query)
    mine = set(queries.group_ids_of(facility.researcher_a))
    fast = queries._ranked_ids(facility.researcher_a, c, 5, mine)
    slow = _slow_ranking(facility.researcher_a, c, 5)
    assert [pk for pk, _ in fast] == [pk for pk, _ in slow]
    assert [s for _, s in fast] == pytest.approx([s for _, s in slow], abs=1e-9)


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


def _table(n: int) -> digest.Table:
    """A bare table of n live rows, session i on specimen 100 + i, all scores to be given."""
    ids = np.arange(n, dtype=np.int64)
    return digest.Table(
        session_id=ids,
        specimen_id=ids + 100,
        account_id=np.zeros(n, dtype=np.int64),
        instrument_id=np.zeros(n, dtype=np.int64),
        started_at=ids.astype(np.float64),
        stamp=np.zeros(n),
        size_log10=np.full(n, np.nan),
        beam_sensitive=np.zeros(n, dtype=bool),
        alive=np.ones(n, dtype=bool),
        codes={c: np.zeros(n, dtype=np.int32) for c in digest.CATEGORIES},
        vocabulary={c: {} for c in digest.CATEGORIES},
    )


@pytest.mark.parametrize("first_chunk", [1, 2, 8])
def test_a_weak_attribute_match_with_strong_text_is_not_pruned(monkeypatch, first_chunk):
    # Three sessions alike in attributes (5) but without the text, one less alike (3) whose
    # specimen matches the text fully (+3): it must come first, whatever the chunking.
    monkeypatch.setattr(queries, "FIRST_TEXT_CHUNK", first_chunk)
    monkeypatch.setattr(text, "document_matches", lambda t, n: None)
    asked: list[list[int]] = []

    def document_rank(specimens, t):
        asked.append(sorted(int(s) for s in specimens))
        return {103: 1.0} if 103 in asked[-1] else {}

    monkeypatch.setattr(text, "document_rank", document_rank)
    table = _table(6)
    attributes = np.array([5.0, 5.0, 5.0, 3.0, 1.0, 0.5])
    rows = np.arange(6)
    names = queries._NameParts(table, "carbon tape")  # no material names: no name part
    total = queries._add_text(table, attributes, rows, "carbon tape", 1, names)
    assert total.tolist() == [5.0, 5.0, 5.0, 6.0, 1.0, 0.5]
    # the sessions that cannot reach 6 even with the whole text weight are never asked about
    assert not {104, 105} & {s for batch in asked for s in batch}
