"""The finder's digest: the scored attributes of every finished logbook session, in memory.

Ranking needs an attribute score for every session the person may draw on. At 100 000 sessions a
database query that scores them all (sessions joined to specimens, coatings and accounts, then
sorted) took 60–800 ms on the development machine; the same arithmetic on numpy arrays takes a
few milliseconds. The digest is a copy of a few columns of logbook rows, one per process:

* loaded whole on first use (about a second at 100 000 sessions), and again every
  :data:`RELOAD_SECONDS` as a safety net for what timestamps cannot show;
* brought up to date before each search from the sessions, specimens and coatings whose
  ``updated_at`` is newer than the newest change it has seen (one query of three indexed range
  scans, about a millisecond when nothing changed); every :data:`RECHECK_SECONDS` the look goes
  :data:`MARGIN` further back, for saves whose transactions committed late — after a bulk change
  (a migration, an import) that look reads every row changed in the margin, once a minute for
  ten minutes;
* told by the finder of sessions that turned out to be gone when their details were fetched
  (:meth:`Digest.forget`), e.g. a deleted specimen, which Django detaches with a bulk update
  that moves no timestamp.

The digest only ranks; what a person sees is always read fresh from the logbook. Readers take
:meth:`Digest.table` once and use that snapshot; a refresh builds a new table and swaps it in,
so a search never sees half an update.
"""

from __future__ import annotations

import datetime as dt
import math
import threading
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from django.db.models import FloatField, Func
from django.utils import timezone

from facility.finder.criteria import WEIGHTS, Criteria
from facility.logbook.models import CoatingMaterial, InstrumentSession

MARGIN = dt.timedelta(minutes=10)  # how late a save may commit and still be caught up
RECHECK_SECONDS = 60.0  # how often the margin is looked through again
RELOAD_SECONDS = 3600.0

# The categorical columns, each stored as a small integer code.
CATEGORIES = ("material_class", "conductivity", "form", "coating", "vacuum_mode", "material")
STRONG = ("material_class", "conductivity", "form")  # the attributes a similar specimen shares
UNCOATED = CoatingMaterial.NONE.value  # no coating row and a "none" coating score alike


class Epoch(Func):
    """A timestamp as POSIX seconds (float), computed by the database: parsing half a million
    datetimes in Python took most of the digest's load time."""

    output_field = FloatField()

    def as_postgresql(self, compiler, connection, **extra):
        return self.as_sql(
            compiler, connection, template="EXTRACT(EPOCH FROM %(expressions)s)::float8"
        )

    def as_sqlite(self, compiler, connection, **extra):
        # julianday counts days from noon, 24 November 4714 BC; 2440587.5 is 1970-01-01T00:00Z
        template = "((julianday(%(expressions)s) - 2440587.5) * 86400.0)"
        return self.as_sql(compiler, connection, template=template)


_EPOCHS = {
    "started": Epoch("started_at"),
    "ended": Epoch("ended_at"),
    "session_stamp": Epoch("updated_at"),
    "specimen_stamp": Epoch("specimen__updated_at"),
    "coating_stamp": Epoch("coating__updated_at"),
}
_FIELDS = (
    "pk",
    "specimen_id",
    "account_id",
    "instrument_id",
    "started",
    "ended",
    "vacuum_mode",
    "specimen__material_class",
    "specimen__conductivity",
    "specimen__form",
    "specimen__feature_size_nm",
    "specimen__beam_sensitive",
    "coating__material",
    "session_stamp",
    "specimen_stamp",
    "coating_stamp",
    "specimen__material",
)


@dataclass(frozen=True)
class Table:
    """Column arrays, one row per digested session (rows of forgotten sessions stay, dead)."""

    session_id: np.ndarray  # int64
    specimen_id: np.ndarray  # int64
    account_id: np.ndarray  # int64
    instrument_id: np.ndarray  # int64
    started_at: np.ndarray  # float64, POSIX seconds
    stamp: np.ndarray  # float64: newest updated_at of the session, its specimen and coating
    size_log10: np.ndarray  # float64, NaN when no feature size is given
    beam_sensitive: np.ndarray  # bool
    alive: np.ndarray  # bool
    codes: dict[str, np.ndarray]  # category → int32 codes (material names are many)
    vocabulary: dict[str, dict[str, int]]  # category → value → code

    def __len__(self) -> int:
        return len(self.session_id)

    def code_of(self, category: str, value: str) -> int:
        return self.vocabulary[category].get(value, -1)

    def names(self, category: str) -> list[str]:
        """The category's values, in code order (code k is names[k])."""
        known = self.vocabulary[category]
        out = [""] * len(known)
        for value, k in known.items():
            out[k] = value
        return out

    def eligible(self, account_ids: Iterable[int] | None) -> np.ndarray:
        """Live rows, of the given accounts (None: all accounts)."""
        if account_ids is None:
            return self.alive.copy()
        wanted = np.fromiter(account_ids, dtype=np.int64)
        return self.alive & np.isin(self.account_id, wanted)

    def attribute_scores(self, c: Criteria, instrument_ids: Sequence[int] = ()) -> np.ndarray:
        """The attribute part of the similarity score of every row (see ``criteria.WEIGHTS``):
        full weight for each attribute that matches; for the feature size, the weight times
        1 − |log10(size / wanted)|, nothing a decade away or more."""
        score = np.zeros(len(self), dtype=np.float64)
        for name in ("material_class", "conductivity", "form", "vacuum_mode"):
            value = getattr(c, name)
            if value:
                score += WEIGHTS[name] * (self.codes[name] == self.code_of(name, value))
        if c.coating:
            score += WEIGHTS["coating"] * (
                self.codes["coating"] == self.code_of("coating", c.coating)
            )
        if c.beam_sensitive is not None:
            score += WEIGHTS["beam_sensitive"] * (self.beam_sensitive == c.beam_sensitive)
        if c.instrument_kind:
            wanted = np.asarray(list(instrument_ids), dtype=np.int64)
            score += WEIGHTS["instrument_kind"] * np.isin(self.instrument_id, wanted)
        if c.feature_size_nm:
            closeness = 1.0 - np.abs(self.size_log10 - math.log10(c.feature_size_nm))
            score += WEIGHTS["feature_size_nm"] * np.nan_to_num(np.clip(closeness, 0.0, None))
        return score

    def shares_a_strong_attribute(self, c: Criteria) -> np.ndarray:
        """Rows that share the material class, conductivity or form, where any is given (a
        session alike only in, say, being uncoated is no similar specimen); else all rows."""
        given = [n for n in STRONG if getattr(c, n)]
        if not given:
            return np.ones(len(self), dtype=bool)
        out = np.zeros(len(self), dtype=bool)
        for name in given:
            out |= self.codes[name] == self.code_of(name, getattr(c, name))
        return out

    def best(self, scores: np.ndarray, rows: np.ndarray, limit: int) -> np.ndarray:
        """The `limit` rows of `rows` with the highest score, newest session first among equal
        scores (scores rounded to 1e-9, so that float noise does not decide a tie)."""
        if limit <= 0 or len(rows) == 0:
            return rows[:0]
        if len(rows) > limit:
            values = scores[rows]
            kth = np.partition(values, len(values) - limit)[len(values) - limit]
            rows = rows[values >= kth - 1e-9]
        order = np.lexsort((-self.started_at[rows], -np.round(scores[rows], 9)))
        return rows[order][:limit]


def _eligible_row(row: tuple[Any, ...]) -> bool:
    # the same rule as the finder's pool: closed sessions on a described specimen
    return row[5] is not None and row[1] is not None and bool(row[7])


class Digest:
    """One process's digest; :func:`current` gives the shared one."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._table: Table | None = None
        self._position: dict[int, int] = {}
        self._newest: dt.datetime | None = None  # newest updated_at seen in the logbook
        self._passed_over: dict[int, float] = {}  # ineligible sessions seen, at their stamp
        self._loaded_at = 0.0
        self._rechecked_at = 0.0

    # --- reading ------------------------------------------------------------------------

    def table(self) -> Table:
        """An up-to-date snapshot (loads or catches up first)."""
        with self._lock:
            if self._table is None or time.monotonic() - self._loaded_at > RELOAD_SECONDS:
                self._load()
            else:
                recheck = time.monotonic() - self._rechecked_at > RECHECK_SECONDS
                self._catch_up(recheck)
            assert self._table is not None
            return self._table

    def forget(self, session_ids: Iterable[int]) -> None:
        """Sessions found gone or no longer eligible: rank them no more until they change."""
        with self._lock:
            if self._table is None:
                return
            rows = [self._position[s] for s in session_ids if s in self._position]
            if rows:
                alive = self._table.alive.copy()
                alive[rows] = False
                self._table = replace(self._table, alive=alive)

    def clear(self) -> None:
        """Drop everything; the next search loads afresh (tests, and after bulk imports)."""
        with self._lock:
            self._table = None
            self._position = {}
            self._passed_over = {}
            self._newest = None

    # --- building -----------------------------------------------------------------------

    def _load(self) -> None:
        started = timezone.now()
        rows = list(
            InstrumentSession.objects.filter(ended_at__isnull=False, specimen__isnull=False)
            .annotate(**_EPOCHS)
            .values_list(*_FIELDS)
        )
        self._position = {}
        self._passed_over = {}
        self._table = self._build([r for r in rows if _eligible_row(r)], base=None)
        # The load saw everything committed before it began; catching up from there (less the
        # margin) finds what was saved since.
        self._newest = started
        self._loaded_at = self._rechecked_at = time.monotonic()

    def _catch_up(self, recheck: bool) -> None:
        assert self._newest is not None
        since = self._newest - MARGIN if recheck else self._newest
        if recheck:
            self._rechecked_at = time.monotonic()
        changed: dict[int, float] = {}
        sessions = InstrumentSession.objects.order_by()
        recent = (
            sessions.filter(updated_at__gte=since)
            .annotate(moment=_EPOCHS["session_stamp"])
            .values_list("pk", "moment")
            .union(
                sessions.filter(specimen__updated_at__gte=since)
                .annotate(moment=_EPOCHS["specimen_stamp"])
                .values_list("pk", "moment"),
                sessions.filter(coating__updated_at__gte=since)
                .annotate(moment=_EPOCHS["coating_stamp"])
                .values_list("pk", "moment"),
                all=True,
            )
        )
        for pk, moment in recent:  # one query; each part an indexed range scan
            if pk not in changed or moment > changed[pk]:
                changed[pk] = moment
        table = self._table
        assert table is not None

        def known(pk: int, moment: float) -> bool:
            if pk in self._position and table.alive[self._position[pk]]:
                return table.stamp[self._position[pk]] >= moment
            return self._passed_over.get(pk, -1.0) >= moment

        stale = [pk for pk, moment in changed.items() if not known(pk, moment)]
        if not stale:
            return
        rows = list(
            InstrumentSession.objects.filter(pk__in=stale).annotate(**_EPOCHS).values_list(*_FIELDS)
        )
        eligible = [r for r in rows if _eligible_row(r)]
        self._table = self._build(eligible, base=table)
        fetched = {r[0] for r in eligible}
        gone = [self._position[pk] for pk in stale if pk in self._position and pk not in fetched]
        if gone:
            self._table.alive[gone] = False  # a fresh array of the new table, not yet shared
        for pk in stale:
            if pk not in fetched:  # open, or without a specimen: look again when it changes
                self._passed_over[pk] = changed[pk]
        newest = dt.datetime.fromtimestamp(max(changed.values()), tz=dt.UTC)
        self._newest = max(self._newest, newest)

    def _build(self, rows: list[tuple[Any, ...]], base: Table | None) -> Table:
        """A new table: `base` with `rows` written over their old rows or appended."""
        vocabulary = {k: dict(v) for k, v in base.vocabulary.items()} if base else {}
        for category in CATEGORIES:
            vocabulary.setdefault(category, {})

        def code(category: str, value: str) -> int:
            known = vocabulary[category]
            if value not in known:
                known[value] = len(known)
            return known[value]

        n_old = len(base) if base else 0
        new_ids = [r[0] for r in rows if r[0] not in self._position]
        n = n_old + len(new_ids)
        for k, pk in enumerate(new_ids):
            self._position[pk] = n_old + k

        def grown(old: np.ndarray | None, dtype: Any, fill: Any) -> np.ndarray:
            # always a fresh array: the old table may be in a reader's hands
            out = np.full(n, fill, dtype=dtype)
            if old is not None:
                out[:n_old] = old
            return out

        def column(name: str) -> np.ndarray | None:
            return getattr(base, name) if base is not None else None

        table = Table(
            session_id=grown(column("session_id"), np.int64, 0),
            specimen_id=grown(column("specimen_id"), np.int64, 0),
            account_id=grown(column("account_id"), np.int64, 0),
            instrument_id=grown(column("instrument_id"), np.int64, 0),
            started_at=grown(column("started_at"), np.float64, 0.0),
            stamp=grown(column("stamp"), np.float64, 0.0),
            size_log10=grown(column("size_log10"), np.float64, np.nan),
            beam_sensitive=grown(column("beam_sensitive"), np.bool_, False),
            alive=grown(column("alive"), np.bool_, False),
            codes={
                c: grown(base.codes[c] if base is not None else None, np.int32, -1)
                for c in CATEGORIES
            },
            vocabulary=vocabulary,
        )
        if not rows:
            return table
        # column by column: element-wise numpy assignment cost more than the query
        at = np.fromiter((self._position[r[0]] for r in rows), dtype=np.int64, count=len(rows))

        def floats(k: int, fill: float) -> np.ndarray:
            return np.array([fill if r[k] is None else r[k] for r in rows], dtype=np.float64)

        table.session_id[at] = [r[0] for r in rows]
        table.specimen_id[at] = [r[1] for r in rows]
        table.account_id[at] = [r[2] for r in rows]
        table.instrument_id[at] = [r[3] for r in rows]
        table.started_at[at] = floats(4, 0.0)
        table.stamp[at] = np.maximum.reduce([floats(13, 0.0), floats(14, 0.0), floats(15, 0.0)])
        size = floats(10, np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            table.size_log10[at] = np.where(size > 0, np.log10(size), np.nan)
        table.beam_sensitive[at] = [bool(r[11]) for r in rows]
        table.alive[at] = True
        for category, k, default in (
            ("vacuum_mode", 6, ""),
            ("material_class", 7, ""),
            ("conductivity", 8, ""),
            ("form", 9, ""),
            ("coating", 12, UNCOATED),
            ("material", 16, ""),
        ):
            table.codes[category][at] = [code(category, r[k] or default) for r in rows]
        return table


_shared = Digest()


def current() -> Digest:
    return _shared
