"""Text relevance of specimens: PostgreSQL full-text search and trigrams, or a portable match.

Relevance is a number in [0, 1] per specimen. On PostgreSQL a specimen matches when its stored document (name, material, preparation, notes; see
migration 0002) matches any of the words, stemmed, or its material name is trigram-similar to
the whole text (pg_trgm's ``%``, for misspelt names); relevance is the larger of ts_rank × 10
and the trigram similarity of the material name. Elsewhere a specimen matches when one of its
four texts contains a word, and relevance is the share of the words found.

The finder computes the two parts apart and joins them (:func:`combine`): the document's rank per
specimen (:func:`document_rank`, the GIN index), and the name's similarity once per distinct
material name (:func:`name_similarity`) — a facility has far fewer names than specimens, and
the trigram index is unselective for short words that share trigrams with common names.
``tests/finder/test_digest.py`` checks the parts joined against the definition in one query.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np
from django.db import connection
from django.db.models import Q

from facility.logbook.models import Specimen

# The document as PostgreSQL stores it (the expression of the generated column, migration 0002).
SPECIMEN_DOCUMENT_SQL = (
    "(coalesce(name, '') || ' ' || coalesce(material, '') || ' ' || "
    "coalesce(preparation, '') || ' ' || coalesce(notes, ''))"
)
DOCUMENT_COLUMN = "finder_document"

WORD = re.compile(r"[a-z0-9]{3,}")
MAX_TOKENS = 8
_CHUNK = 900  # ids per query on SQLite, below its limit of bound parameters

# ts_rank of a short document rarely exceeds ~0.1: scaled to the trigram's 0–1 range.
_RANK_SQL = f"ts_rank({DOCUMENT_COLUMN}, to_tsquery('english', %(q)s)) * 10.0"
_DOCUMENT_MATCH_SQL = f"{DOCUMENT_COLUMN} @@ to_tsquery('english', %(q)s)"


def tokens(text: str) -> list[str]:
    seen: list[str] = []
    for word in WORD.findall(text.lower()):
        if word not in seen:
            seen.append(word)
    return seen[:MAX_TOKENS]


def uses_postgres() -> bool:
    return connection.vendor == "postgresql"


def _params(text: str) -> dict[str, str]:
    # words are [a-z0-9]{3,}: nothing in them that to_tsquery would read as an operator
    return {"q": " | ".join(tokens(text)), "text": text[:200]}


def _fetch(sql: str, params: dict) -> dict[int, float]:
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return {pk: float(value) for pk, value in cursor.fetchall()}


# --- the two parts ----------------------------------------------------------------------------


def document_rank(specimen_ids: Sequence[int], text: str) -> dict[int, float]:
    """The document part for the given specimens whose document matches (others left out)."""
    if not tokens(text) or not len(specimen_ids):
        return {}
    ids = [int(i) for i in specimen_ids]
    if uses_postgres():
        sql = (
            f"SELECT id, {_RANK_SQL} FROM logbook_specimen "
            f"WHERE id = ANY(%(ids)s) AND {_DOCUMENT_MATCH_SQL}"
        )
        return _fetch(sql, {**_params(text), "ids": ids})
    out: dict[int, float] = {}
    words = tokens(text)
    for start in range(0, len(ids), _CHUNK):
        rows = Specimen.objects.filter(pk__in=ids[start : start + _CHUNK]).values_list(
            "pk", "name", "material", "preparation", "notes"
        )
        for pk, *texts in rows:
            rel = _share_found(words, texts)
            if rel > 0:
                out[pk] = rel
    return out


def document_matches(text: str, at_most: int) -> dict[int, float] | None:
    """The document part for every specimen in the facility whose document matches, if there
    are no more than `at_most` of them; None if there are more."""
    if not tokens(text):
        return {}
    if uses_postgres():
        sql = (
            f"SELECT id, {_RANK_SQL} FROM logbook_specimen WHERE {_DOCUMENT_MATCH_SQL} LIMIT %(n)s"
        )
        found = _fetch(sql, {**_params(text), "n": at_most + 1})
    else:
        found = _portable_matches(text, at_most + 1)
    return None if len(found) > at_most else found


def best_documents(text: str, limit: int) -> dict[int, float]:
    """The document part for the `limit` specimens whose documents match best."""
    if not tokens(text):
        return {}
    if uses_postgres():
        sql = (
            f"SELECT id, {_RANK_SQL} AS rank FROM logbook_specimen WHERE {_DOCUMENT_MATCH_SQL} "
            "ORDER BY rank DESC, id DESC LIMIT %(limit)s"
        )
        return _fetch(sql, {**_params(text), "limit": limit})
    scored = sorted(_portable_matches(text, None).items(), key=lambda item: (-item[1], -item[0]))
    return dict(scored[:limit])


def name_similarity(names: Sequence[str], text: str) -> tuple[np.ndarray, np.ndarray]:
    """For each material name: pg_trgm's similarity to `text`, and whether it passes ``%``
    (the similarity threshold). Zero and False everywhere off PostgreSQL."""
    similarity = np.zeros(len(names), dtype=np.float64)
    passes = np.zeros(len(names), dtype=bool)
    if not uses_postgres() or not len(names) or not tokens(text):
        return similarity, passes
    sql = (
        "SELECT k - 1, similarity(m, %(text)s), m %% %(text)s "
        "FROM unnest(%(names)s::text[]) WITH ORDINALITY AS t(m, k)"
    )
    with connection.cursor() as cursor:
        cursor.execute(sql, {"text": text[:200], "names": list(names)})
        for k, value, ok in cursor.fetchall():
            similarity[k], passes[k] = value, ok
    return similarity, passes


def combine(
    matched: np.ndarray, rank: np.ndarray, similarity: np.ndarray, passes: np.ndarray
) -> np.ndarray:
    """Relevance from the parts, elementwise: the larger of the two for a matching document, the
    name's similarity alone where only the name passes the trigram threshold, else 0."""
    return np.where(matched, np.maximum(rank, similarity), np.where(passes, similarity, 0.0))


def _portable_matches(text: str, at_most: int | None) -> dict[int, float]:
    words = tokens(text)
    match = Q()
    for w in words:
        match |= (
            Q(material__icontains=w)
            | Q(name__icontains=w)
            | Q(preparation__icontains=w)
            | Q(notes__icontains=w)
        )
    rows = Specimen.objects.filter(match).values_list(
        "pk", "name", "material", "preparation", "notes"
    )
    if at_most is not None:
        rows = rows[:at_most]
    return {pk: _share_found(words, texts) for pk, *texts in rows}


def _share_found(words: list[str], texts: Sequence[str | None]) -> float:
    hay = " ".join(t for t in texts if t).lower()
    return sum(w in hay for w in words) / len(words)
