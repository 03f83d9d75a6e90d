"""Text relevance: PostgreSQL full-text search and trigrams, or a portable token match.

The SQL document expression must stay identical to the one indexed in migration 0001, or
PostgreSQL will not use the index.
"""

from __future__ import annotations

import re

from django.db import connection
from django.db.models import BooleanField, Case, ExpressionWrapper, FloatField, Q, Value, When
from django.db.models.expressions import RawSQL
from django.db.models.functions import Greatest

SPECIMEN_DOCUMENT_SQL = (
    "(coalesce(name, '') || ' ' || coalesce(material, '') || ' ' || "
    "coalesce(preparation, '') || ' ' || coalesce(notes, ''))"
)
# In a query the specimen table is joined under its own name, so qualify the columns there.
_QUALIFIED = SPECIMEN_DOCUMENT_SQL.replace("coalesce(", "coalesce(logbook_specimen.")

WORD = re.compile(r"[a-z0-9]{3,}")
MAX_TOKENS = 8


def tokens(text: str) -> list[str]:
    seen: list[str] = []
    for word in WORD.findall(text.lower()):
        if word not in seen:
            seen.append(word)
    return seen[:MAX_TOKENS]


def uses_postgres() -> bool:
    return connection.vendor == "postgresql"


def relevance(text: str):
    """An expression in [0, 1]: how well a session's specimen text matches `text`."""
    words = tokens(text)
    if not words:
        return Value(0.0, output_field=FloatField())
    if uses_postgres():
        query = " | ".join(words)
        rank = RawSQL(
            f"ts_rank(to_tsvector('english', {_QUALIFIED}), to_tsquery('english', %s))",
            (query,),
            output_field=FloatField(),
        )
        trigram = RawSQL(
            "similarity(logbook_specimen.material, %s)", (text[:200],), output_field=FloatField()
        )
        # ts_rank of a short document rarely exceeds ~0.1: scale it to the trigram's 0–1 range.
        return Greatest(ExpressionWrapper(rank * Value(10.0), output_field=FloatField()), trigram)
    parts = [
        Case(
            When(
                Q(specimen__material__icontains=w)
                | Q(specimen__name__icontains=w)
                | Q(specimen__preparation__icontains=w)
                | Q(specimen__notes__icontains=w),
                then=Value(1.0),
            ),
            default=Value(0.0),
            output_field=FloatField(),
        )
        for w in words
    ]
    total = parts[0]
    for part in parts[1:]:
        total = total + part
    return ExpressionWrapper(total / Value(float(len(words))), output_field=FloatField())


def text_filter(text: str) -> Q:
    """Rows worth scoring for their text (on PostgreSQL this condition uses the GIN indexes)."""
    words = tokens(text)
    if not words:
        return Q(pk__in=[])
    if uses_postgres():
        query = " | ".join(words)
        fts = RawSQL(
            f"to_tsvector('english', {_QUALIFIED}) @@ to_tsquery('english', %s)",
            (query,),
            output_field=BooleanField(),
        )
        trigram = RawSQL(
            "logbook_specimen.material %% %s", (text[:200],), output_field=BooleanField()
        )
        return Q(fts) | Q(trigram)
    q = Q()
    for w in words:
        q |= Q(specimen__material__icontains=w) | Q(specimen__name__icontains=w)
    return q
