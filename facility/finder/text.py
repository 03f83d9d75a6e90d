"""Text relevance of specimens: PostgreSQL full-text search and trigrams, or a portable match.

Relevance is a number in [0, 1] per specimen; specimens that do not match get none (0). On
PostgreSQL a specimen matches when its stored document (name, material, preparation, notes; see
migration 0002) matches any of the words, stemmed, or its material name is trigram-similar to
the whole text (for misspelt names); relevance is the larger of ts_rank × 10 and the trigram
similarity. Elsewhere a specimen matches when one of its four texts contains a word, and
relevance is the share of the words found.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

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
_RELEVANCE_SQL = (
    f"GREATEST(ts_rank({DOCUMENT_COLUMN}, to_tsquery('english', %(q)s)) * 10.0, "
    "similarity(material, %(text)s))"
)
_MATCH_SQL = f"({DOCUMENT_COLUMN} @@ to_tsquery('english', %(q)s) OR material %% %(text)s)"


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


def relevance_of(specimen_ids: Sequence[int], text: str) -> dict[int, float]:
    """Relevance of the given specimens that match `text` (the others are left out)."""
    if not tokens(text) or not len(specimen_ids):
        return {}
    ids = [int(i) for i in specimen_ids]
    if uses_postgres():
        sql = (
            f"SELECT id, {_RELEVANCE_SQL} FROM logbook_specimen "
            f"WHERE id = ANY(%(ids)s) AND {_MATCH_SQL}"
        )
        with connection.cursor() as cursor:
            cursor.execute(sql, {**_params(text), "ids": ids})
            return {pk: float(rel) for pk, rel in cursor.fetchall()}
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


def best_matches(text: str, limit: int) -> dict[int, float]:
    """The `limit` most relevant specimens of all (for a search by text alone)."""
    words = tokens(text)
    if not words:
        return {}
    if uses_postgres():
        sql = (
            f"SELECT id, {_RELEVANCE_SQL} AS rel FROM logbook_specimen WHERE {_MATCH_SQL} "
            "ORDER BY rel DESC, id DESC LIMIT %(limit)s"
        )
        with connection.cursor() as cursor:
            cursor.execute(sql, {**_params(text), "limit": limit})
            return {pk: float(rel) for pk, rel in cursor.fetchall()}
    match = Q()
    for w in words:
        match |= (
            Q(material__icontains=w)
            | Q(name__icontains=w)
            | Q(preparation__icontains=w)
            | Q(notes__icontains=w)
        )
    scored = [
        (pk, _share_found(words, texts))
        for pk, *texts in Specimen.objects.filter(match).values_list(
            "pk", "name", "material", "preparation", "notes"
        )
    ]
    scored.sort(key=lambda item: (-item[1], -item[0]))
    return dict(scored[:limit])


def _share_found(words: list[str], texts: Sequence[str | None]) -> float:
    hay = " ".join(t for t in texts if t).lower()
    return sum(w in hay for w in words) / len(words)
