"""The finder: past sessions on similar specimens, and what worked and failed on them.

Ranking uses the finder's digest (``digest.py``: attribute columns of every session in numpy
arrays) and asks the database for text relevance of the candidates that could still make the
list; only the few hundred best are then read from the logbook, fresh, for the summary and the
explanations.
"""

from __future__ import annotations

import statistics
from collections import Counter
from collections.abc import Collection
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Exists, OuterRef, Q, QuerySet

from facility.finder import digest
from facility.finder import text as text_search
from facility.finder.criteria import WEIGHTS, Criteria
from facility.instruments.models import Instrument
from facility.logbook.models import (
    AnalysisState,
    Conditions,
    Flag,
    FlagCode,
    InstrumentSession,
    Micrograph,
)
from facility.people.models import Account
from facility.people.queries import group_ids_of, is_staff

# Outcome codes that make a session a "failure" for the summary.
FAILURE_CODES = (FlagCode.CHARGING, FlagCode.LOW_RESOLUTION, FlagCode.ASTIGMATISM)
SUMMARY_POOL = 200  # best candidates the summary is drawn from
SIMILAR_SHARE = 0.5  # a candidate is "similar" at half the best possible score or more
# Sessions (best by attributes) whose text relevance is asked for first (see _add_text).
FIRST_TEXT_CHUNK = 1000


@dataclass
class Hit:
    session_id: int
    score: float
    reasons: list[str]
    outcome: str  # "worked", "charging", "low_resolution", ... or "not analysed"
    conditions: list[dict[str, Any]]
    coating: str
    vacuum_mode: str
    material_class: str
    conductivity: str
    form: str
    feature_size_nm: float | None
    instrument_kind: str
    visible: bool
    # Only when visible:
    date: str | None = None
    instrument: str | None = None
    specimen: str | None = None
    material: str | None = None
    operator: str | None = None
    group: str | None = None
    micrograph_ids: list[int] = field(default_factory=list)


@dataclass
class Summary:
    similar: int
    worked: int
    failed: int
    settings: dict[str, Any]
    failures: list[str]


@dataclass
class Result:
    criteria: Criteria
    hits: list[Hit]
    summary: Summary
    suggestion: dict[str, Any]


def _pool(user: AbstractBaseUser, mine: Collection[int]) -> QuerySet[InstrumentSession]:
    """Sessions that may inform this person: their own groups', and those of groups that let
    their sessions count (anonymised) in facility-wide summaries. Staff: all."""
    qs = InstrumentSession.objects.filter(
        ended_at__isnull=False, specimen__material_class__isnull=False
    )
    if is_staff(user):
        return qs
    return qs.filter(
        Q(account__group__counts_in_summaries=True) | Q(account__group_id__in=list(mine))
    )


def _accounts_drawn_on(user: AbstractBaseUser, mine: Collection[int]) -> list[int] | None:
    """Accounts whose sessions may inform this person (None: all, for staff) — the same rule
    as :func:`_pool`, resolved first so that the digest can filter by it."""
    if is_staff(user):
        return None
    return list(
        Account.objects.filter(
            Q(group__counts_in_summaries=True) | Q(group_id__in=list(mine))
        ).values_list("pk", flat=True)
    )


def _ranked_ids(
    user: AbstractBaseUser, criteria: Criteria, limit: int, mine: Collection[int]
) -> list[tuple[int, float]]:
    """(session id, score) of the best `limit` sessions with a positive score, best first.

    Attribute scores come from the digest for every session at once; text relevance is asked
    of the database only where it can still change the answer (:func:`_add_text`). For a
    search by text alone, the most relevant specimens of all are taken.
    """
    table = digest.current().table()
    kind_ids: list[int] = []
    if criteria.instrument_kind:
        kind_ids = list(
            Instrument.objects.filter(kind=criteria.instrument_kind).values_list("pk", flat=True)
        )
    rows = np.flatnonzero(
        table.eligible(_accounts_drawn_on(user, mine)) & table.shares_a_strong_attribute(criteria)
    )
    total = table.attribute_scores(criteria, kind_ids)
    if text_search.tokens(criteria.text):
        names = _NameParts(table, criteria.text)
        if criteria.given() == ["text"]:
            # every session has a specimen: the best few times `limit` documents give enough
            # sessions even when some are not in this person's pool
            documents = text_search.best_documents(criteria.text, max(5 * limit, 1000))
            everything = np.arange(len(table))
            total = total + names.bonus(everything, _lookup(table, documents, everything))
        else:
            total = _add_text(table, total, rows, criteria.text, limit, names)
    rows = rows[total[rows] > 0]
    best = table.best(total, rows, limit)
    return [(int(table.session_id[i]), float(total[i])) for i in best]


def _kth_best(values: np.ndarray, k: int) -> float:
    if len(values) < k:
        return -np.inf
    return float(np.partition(values, len(values) - k)[len(values) - k])


class _NameParts:
    """The material-name part of text relevance for every row, from one query over the
    distinct names (see ``text.py``)."""

    def __init__(self, table: digest.Table, text: str) -> None:
        similarity, passes = text_search.name_similarity(table.names("material"), text)
        codes = table.codes["material"]
        known = codes >= 0
        self.similarity = np.where(known, similarity[codes.clip(0)] if len(similarity) else 0, 0.0)
        self.passes = known & (passes[codes.clip(0)] if len(passes) else False)

    def bonus(self, rows: np.ndarray, document: tuple[np.ndarray, np.ndarray] | None) -> np.ndarray:
        """The text part of the score for `rows` (zero elsewhere); `document`: (matched, rank)
        for those rows, or None where no document part is known yet."""
        out = np.zeros(len(self.similarity), dtype=np.float64)
        if document is None:
            matched = np.zeros(len(rows), dtype=bool)
            rank = np.zeros(len(rows), dtype=np.float64)
        else:
            matched, rank = document
        relevance = text_search.combine(matched, rank, self.similarity[rows], self.passes[rows])
        out[rows] = WEIGHTS["text"] * np.minimum(1.0, relevance)
        return out


def _lookup(
    table: digest.Table, by_specimen: dict[int, float], rows: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(found, value) for `rows` from a dict keyed by specimen id."""
    found = np.zeros(len(rows), dtype=bool)
    value = np.zeros(len(rows), dtype=np.float64)
    if not by_specimen or not len(rows):
        return found, value
    ids = np.fromiter(by_specimen, dtype=np.int64, count=len(by_specimen))
    values = np.fromiter(by_specimen.values(), dtype=np.float64, count=len(by_specimen))
    order = np.argsort(ids)
    ids, values = ids[order], values[order]
    specimens = table.specimen_id[rows]
    where = np.searchsorted(ids, specimens).clip(0, len(ids) - 1)
    found = ids[where] == specimens
    value[found] = values[where[found]]
    return found, value


def _add_text(
    table: digest.Table,
    attributes: np.ndarray,
    rows: np.ndarray,
    text: str,
    limit: int,
    names: _NameParts,
) -> np.ndarray:
    """Attribute scores plus the text bonus wherever it can matter; exact for the best `limit`.

    The name part of relevance is known for every row at once; the document part is asked of
    the database only where it can still change the answer. A session can enter the best
    `limit` only if its attribute score plus the whole text weight reaches the `limit`-th best
    total known so far. The document part is asked first for the sessions best by attributes;
    the bonuses found raise that bar, which usually leaves few candidates. For those left, one
    query asks whether the text matches few documents in the whole facility (a rare word: the
    index answers at once); if many, the candidates are asked about in growing chunks, best
    first, until none is left that could change the answer.
    """
    weight = WEIGHTS["text"]
    total = attributes + names.bonus(rows, None)
    bar = _kth_best(total[rows], limit)
    pending = rows[attributes[rows] + weight >= bar - 1e-9]
    pending = pending[np.argsort(-attributes[pending], kind="stable")]
    chunk, probed = FIRST_TEXT_CHUNK, False
    while len(pending):
        if not probed and chunk > FIRST_TEXT_CHUNK:
            probed = True
            wanted = len(np.unique(table.specimen_id[pending]))
            every_match = text_search.document_matches(text, wanted)
            if every_match is not None:
                bonus = names.bonus(pending, _lookup(table, every_match, pending))
                total[pending] = attributes[pending] + bonus[pending]
                break
        take, pending = pending[:chunk], pending[chunk:]
        ranks = text_search.document_rank(np.unique(table.specimen_id[take]), text)
        bonus = names.bonus(take, _lookup(table, ranks, take))
        total[take] = attributes[take] + bonus[take]
        chunk *= 4
        bar = _kth_best(total[rows], limit)
        pending = pending[attributes[pending] + weight >= bar - 1e-9]
    return total


def candidates(
    user: AbstractBaseUser, criteria: Criteria, limit: int, mine: Collection[int] | None = None
) -> list[InstrumentSession]:
    """The best `limit` sessions, read fresh from the logbook, best first (each with `score`).
    `mine`: the person's group ids, when the caller has them already."""
    mine = set(group_ids_of(user)) if mine is None else mine
    for _attempt in range(3):
        ranked = _ranked_ids(user, criteria, limit, mine)
        sessions = _fetch(user, mine, dict(ranked))
        gone = {pk for pk, _ in ranked} - {s.pk for s in sessions}
        if not gone:
            break
        # the digest ranked sessions that are gone or no longer eligible: rank again without
        digest.current().forget(gone)
    sessions.sort(key=lambda s: (-round(s.score, 9), -s.started_at.timestamp()))
    return sessions[:limit]


_CONDITION_FIELDS = (
    "accelerating_voltage_kv",
    "working_distance_mm",
    "probe_current_na",
    "detector",
    "dwell_time_us",
    "vacuum_mode",
)
# Only what the summary needs of its few hundred sessions; the hits shown get _HIT_FIELDS too.
_SESSION_FIELDS = (
    "started_at",
    "vacuum_mode",
    "coating__material",
    "coating__thickness_nm",
)
_HIT_FIELDS = (
    "started_at",
    "vacuum_mode",
    "specimen__name",
    "specimen__material",
    "specimen__material_class",
    "specimen__conductivity",
    "specimen__form",
    "specimen__feature_size_nm",
    "specimen__preparation",
    "specimen__notes",
    "coating__material",
    "coating__thickness_nm",
    "instrument__name",
    "instrument__kind",
    "operator__username",
    "operator__first_name",
    "operator__last_name",
    "account__group__name",
    "account__group__shares_details",
)


def _fetch(
    user: AbstractBaseUser, mine: Collection[int], score_of: dict[int, float]
) -> list[InstrumentSession]:
    """The sessions, each with `score`, `failed`, `analysed`, `condition_rows` (Conditions in
    logged order) and `failure_codes` (codes of its standing failure flags)."""
    analysed = Micrograph.objects.filter(session=OuterRef("pk"), state=AnalysisState.DONE)
    sessions = list(
        _pool(user, mine)
        .filter(pk__in=list(score_of))
        .annotate(analysed=Exists(analysed))
        .order_by()
        .select_related("coating")
        .only(*_SESSION_FIELDS)
    )
    ids = [s.pk for s in sessions]
    rows: dict[int, list[Conditions]] = {pk: [] for pk in ids}
    # Plain queries grouped here rather than prefetch_related, whose per-object bookkeeping
    # cost more than the queries themselves at a few hundred sessions.
    for row in (
        Conditions.objects.filter(session_id__in=ids)
        .only("session_id", *_CONDITION_FIELDS)
        .order_by("id")
    ):
        rows[row.session_id].append(row)
    codes: dict[int, list[str]] = {pk: [] for pk in ids}
    for pk, code in Flag.objects.filter(
        session_id__in=ids, code__in=FAILURE_CODES, dismissed_at__isnull=True
    ).values_list("session_id", "code"):
        codes[pk].append(code)
    for session in sessions:
        session.score = score_of[session.pk]
        session.condition_rows = rows[session.pk]
        session.failure_codes = codes[session.pk]
        session.failed = bool(session.failure_codes)
    return sessions


def _outcome(session: InstrumentSession) -> str:
    if session.failed:
        codes = sorted(session.failure_codes)
        return codes[0] if codes else "flagged"
    return "worked" if session.analysed else "not analysed"


def _reasons(session: InstrumentSession, c: Criteria) -> list[str]:
    s = session.specimen
    out = []
    if c.material_class and s.material_class == c.material_class:
        out.append(f"same material class ({s.get_material_class_display().lower()})")
    if c.conductivity and s.conductivity == c.conductivity:
        out.append(f"also {s.get_conductivity_display().lower()}")
    if c.form and s.form == c.form:
        out.append(f"same form ({s.get_form_display().lower()})")
    if c.feature_size_nm and s.feature_size_nm:
        out.append(f"features {s.feature_size_nm:g} nm (you: {c.feature_size_nm:g} nm)")
    if c.coating:
        have = session.coating.material if session.coating else "none"
        if have == c.coating:
            out.append("same coating" if have != "none" else "also uncoated")
    if c.vacuum_mode and session.vacuum_mode == c.vacuum_mode:
        out.append(f"{session.get_vacuum_mode_display().lower()}")
    if c.instrument_kind and session.instrument.kind == c.instrument_kind:
        out.append(f"on an {session.instrument.kind}")
    words = text_search.tokens(c.text)
    hay = f"{s.name} {s.material} {s.preparation} {s.notes}".lower()
    matched = [w for w in words if w in hay]
    if matched:
        out.append("text matches: " + ", ".join(matched))
    elif words and c.text:
        out.append(f"material similar to “{c.text[:40]}”")
    return out


def _conditions(session: InstrumentSession) -> list[dict[str, Any]]:
    return [
        {n: getattr(row, n) for n in _CONDITION_FIELDS if getattr(row, n) not in (None, "")}
        for row in session.condition_rows
    ]


def micrographs_shown_to(user: AbstractBaseUser) -> QuerySet[Micrograph]:
    """Analysed micrographs whose thumbnails a finder hit may show: the same rule as a hit's
    details (staff; the person's own groups and sessions; groups that share their details)."""
    qs = Micrograph.objects.filter(state=AnalysisState.DONE)
    if is_staff(user):
        return qs
    return qs.filter(
        Q(session__account__group__shares_details=True)
        | Q(session__account__group_id__in=group_ids_of(user))
        | Q(session__operator=user)
    )


def _may_see(session: InstrumentSession, user: AbstractBaseUser, mine: set[int]) -> bool:
    group = session.account.group
    return is_staff(user) or group.id in mine or group.shares_details


def _hit(session: InstrumentSession, c: Criteria, user, mine: set[int]) -> Hit:
    s = session.specimen
    coating = session.coating
    hit = Hit(
        session_id=session.pk,
        score=round(float(session.score), 3),
        reasons=_reasons(session, c),
        outcome=_outcome(session),
        conditions=_conditions(session),
        coating="uncoated" if coating is None or coating.material == "none" else str(coating),
        vacuum_mode=session.vacuum_mode,
        material_class=s.material_class,
        conductivity=s.conductivity,
        form=s.form,
        feature_size_nm=s.feature_size_nm,
        instrument_kind=session.instrument.kind,
        visible=_may_see(session, user, mine),
    )
    if hit.visible:
        hit.date = session.started_at.date().isoformat()
        hit.instrument = session.instrument.name
        hit.specimen = s.name
        hit.material = s.material
        hit.operator = session.operator.get_full_name() or session.operator.get_username()
        hit.group = session.account.group.name
    return hit


def _median_range(values: list[float]) -> dict[str, Any] | None:
    if not values:
        return None
    return {
        "median": round(statistics.median(values), 3),
        "min": min(values),
        "max": max(values),
        "count": len(values),
    }


def _settings_of(sessions: list[InstrumentSession]) -> dict[str, Any]:
    rows = [row for s in sessions for row in s.condition_rows]

    def numbers(name: str) -> list[float]:
        return [getattr(r, name) for r in rows if getattr(r, name) is not None]

    coatings = Counter(
        "uncoated" if s.coating is None or s.coating.material == "none" else s.coating.material
        for s in sessions
    )
    thickness = [s.coating.thickness_nm for s in sessions if s.coating and s.coating.thickness_nm]
    return {
        "accelerating_voltage_kv": _median_range(numbers("accelerating_voltage_kv")),
        "working_distance_mm": _median_range(numbers("working_distance_mm")),
        "probe_current_na": _median_range(numbers("probe_current_na")),
        "detector": Counter(r.detector for r in rows if r.detector).most_common(),
        "vacuum_mode": Counter(s.vacuum_mode for s in sessions).most_common(),
        "coating": coatings.most_common(),
        "coating_thickness_nm": _median_range(thickness),
    }


def _max_kv(session: InstrumentSession) -> float | None:
    values = [
        r.accelerating_voltage_kv for r in session.condition_rows if r.accelerating_voltage_kv
    ]
    return max(values) if values else None


def _failure_sentences(failed: list[InstrumentSession], worked_kv_max: float | None) -> list[str]:
    sentences = []
    charging = [s for s in failed if FlagCode.CHARGING in s.failure_codes]
    if charging:
        limit = worked_kv_max if worked_kv_max else 5.0
        traits = {
            "uncoated": lambda s: s.coating is None or s.coating.material == "none",
            "in high vacuum": lambda s: s.vacuum_mode == "high",
            f"above {limit:g} kV": lambda s: (_max_kv(s) or 0) > limit,
        }
        common = [
            name for name, test in traits.items() if sum(map(test, charging)) * 2 >= len(charging)
        ]
        if common:
            n = sum(all(traits[t](s) for t in common) for s in charging)
            sentences.append(f"{n} of {len(charging)} charging cases were {_join(common)}.")
        else:
            sentences.append(f"{len(charging)} similar sessions showed charging.")
    blurred = [s for s in failed if FlagCode.LOW_RESOLUTION in s.failure_codes]
    if blurred:
        long_wd = [
            s for s in blurred if any((r.working_distance_mm or 0) > 8 for r in s.condition_rows)
        ]
        if long_wd and len(long_wd) * 2 >= len(blurred):
            sentences.append(
                f"{len(long_wd)} of {len(blurred)} low-resolution cases used a working distance "
                "above 8 mm."
            )
        else:
            sentences.append(f"{len(blurred)} similar sessions had low resolution.")
    return sentences


def _join(words: list[str]) -> str:
    if len(words) == 1:
        return words[0]
    return ", ".join(words[:-1]) + " and " + words[-1]


def suggestion_from(summary: Summary) -> dict[str, Any]:
    """Conditions to start a new session's log from: the medians and most common choices."""
    s = summary.settings
    out: dict[str, Any] = {}
    for name in ("accelerating_voltage_kv", "working_distance_mm", "probe_current_na"):
        if s.get(name):
            out[name] = s[name]["median"]
    if s.get("detector"):
        out["detector"] = s["detector"][0][0]
    if s.get("vacuum_mode"):
        out["vacuum_mode"] = s["vacuum_mode"][0][0]
    return out


def search(user: AbstractBaseUser, criteria: Criteria, *, limit: int = 20) -> Result:
    """Ranked similar sessions (details only where allowed) and the summary over all of them."""
    mine = set(group_ids_of(user))
    pool = candidates(user, criteria, SUMMARY_POOL, mine)
    cutoff = SIMILAR_SHARE * criteria.max_score()
    similar = [s for s in pool if s.score >= cutoff]
    analysed = [s for s in similar if s.analysed]
    worked = [s for s in analysed if not s.failed]
    failed = [s for s in analysed if s.failed]
    settings = _settings_of(worked)
    kv = settings["accelerating_voltage_kv"]
    summary = Summary(
        similar=len(similar),
        worked=len(worked),
        failed=len(failed),
        settings=settings,
        failures=_failure_sentences(failed, kv["max"] if kv else None),
    )
    shown = pool[:limit]
    details = {
        d.pk: d
        for d in InstrumentSession.objects.filter(pk__in=[s.pk for s in shown])
        .select_related("specimen", "coating", "instrument", "operator", "account__group")
        .only(*_HIT_FIELDS)
    }
    shown = [s for s in shown if s.pk in details]  # (one deleted in between: left out)
    for s in shown:  # the lean row carries the score and outcome, the detailed one the rest
        d = details[s.pk]
        d.score, d.failed, d.analysed = s.score, s.failed, s.analysed
        d.condition_rows, d.failure_codes = s.condition_rows, s.failure_codes
    hits = [_hit(details[s.pk], criteria, user, mine) for s in shown]
    visible_ids = [h.session_id for h in hits if h.visible]
    thumbs: dict[int, list[int]] = {}
    for sid, mid in Micrograph.objects.filter(
        session_id__in=visible_ids, state=AnalysisState.DONE
    ).values_list("session_id", "id")[:500]:
        thumbs.setdefault(sid, []).append(mid)
    for h in hits:
        h.micrograph_ids = thumbs.get(h.session_id, [])[:4]
    return Result(
        criteria=criteria, hits=hits, summary=summary, suggestion=suggestion_from(summary)
    )
