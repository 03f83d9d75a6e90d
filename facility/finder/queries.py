"""The finder: past sessions on similar specimens, and what worked and failed on them.

Scoring happens in the database (one annotated query, ordered, limited); only the few hundred
best candidates come back to Python for the summary and the explanations.
"""

from __future__ import annotations

import math
import statistics
from collections import Counter
from dataclasses import dataclass, field
from typing import Any

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import (
    Case,
    Exists,
    ExpressionWrapper,
    F,
    FloatField,
    OuterRef,
    Prefetch,
    Q,
    QuerySet,
    Value,
    When,
)
from django.db.models.functions import Abs, Greatest, Ln

from facility.finder import text as text_search
from facility.finder.criteria import WEIGHTS, Criteria
from facility.logbook.models import (
    AnalysisState,
    Conditions,
    Flag,
    FlagCode,
    InstrumentSession,
    Micrograph,
)
from facility.people.queries import group_ids_of, is_staff

# Outcome codes that make a session a "failure" for the summary.
FAILURE_CODES = (FlagCode.CHARGING, FlagCode.LOW_RESOLUTION, FlagCode.ASTIGMATISM)
SUMMARY_POOL = 200  # best candidates the summary is drawn from
SIMILAR_SHARE = 0.5  # a candidate is "similar" at half the best possible score or more
TEXT_MATCHES = 500  # sessions whose text matches, scored for relevance


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


def _pool(user: AbstractBaseUser) -> QuerySet[InstrumentSession]:
    """Sessions that may inform this person: their own groups', and those of groups that let
    their sessions count (anonymised) in facility-wide summaries. Staff: all."""
    qs = InstrumentSession.objects.filter(
        ended_at__isnull=False, specimen__material_class__isnull=False
    )
    if is_staff(user):
        return qs
    mine = group_ids_of(user)
    return qs.filter(Q(account__group__counts_in_summaries=True) | Q(account__group_id__in=mine))


def _match(field_name: str, value: Any, weight: float):
    return Case(
        When(**{field_name: value}, then=Value(weight)),
        default=Value(0.0),
        output_field=FloatField(),
    )


def _score(criteria: Criteria):
    parts = []
    c = criteria
    if c.material_class:
        parts.append(
            _match("specimen__material_class", c.material_class, WEIGHTS["material_class"])
        )
    if c.conductivity:
        parts.append(_match("specimen__conductivity", c.conductivity, WEIGHTS["conductivity"]))
    if c.form:
        parts.append(_match("specimen__form", c.form, WEIGHTS["form"]))
    if c.beam_sensitive is not None:
        parts.append(
            _match("specimen__beam_sensitive", c.beam_sensitive, WEIGHTS["beam_sensitive"])
        )
    if c.vacuum_mode:
        parts.append(_match("vacuum_mode", c.vacuum_mode, WEIGHTS["vacuum_mode"]))
    if c.instrument_kind:
        parts.append(_match("instrument__kind", c.instrument_kind, WEIGHTS["instrument_kind"]))
    if c.coating:
        if c.coating == "none":
            parts.append(
                Case(
                    When(Q(coating__isnull=True) | Q(coating__material="none"), then=Value(1.0)),
                    default=Value(0.0),
                    output_field=FloatField(),
                )
                * Value(WEIGHTS["coating"])
            )
        else:
            parts.append(_match("coating__material", c.coating, WEIGHTS["coating"]))
    if c.feature_size_nm:
        # Closeness on a log scale: full weight for the same size, none a decade away or more.
        # Ln on floats: Django's Log casts to numeric on PostgreSQL, which is slow per row.
        decades = Abs(Ln(F("specimen__feature_size_nm") / Value(float(c.feature_size_nm)))) / Value(
            math.log(10)
        )
        closeness = Greatest(Value(0.0), Value(1.0) - decades)
        parts.append(
            Case(
                When(
                    specimen__feature_size_nm__gt=0,
                    then=closeness * Value(WEIGHTS["feature_size_nm"]),
                ),
                default=Value(0.0),
                output_field=FloatField(),
            )
        )
    if not parts:
        return Value(0.0, output_field=FloatField())
    total = parts[0]
    for part in parts[1:]:
        total = total + part
    return ExpressionWrapper(total, output_field=FloatField())


def _prefilter(criteria: Criteria) -> Q | None:
    """Sessions that match at least one strong attribute; None when no attribute is given."""
    q = None
    for name, field_name in (
        ("material_class", "specimen__material_class"),
        ("conductivity", "specimen__conductivity"),
        ("form", "specimen__form"),
    ):
        value = getattr(criteria, name)
        if value:
            term = Q(**{field_name: value})
            q = term if q is None else q | term
    return q


def _ranked_ids(user: AbstractBaseUser, criteria: Criteria, limit: int) -> list[tuple[int, float]]:
    """(session id, score) of the best `limit` sessions, scored in two cheap queries.

    The attribute score is computed in the database over the sessions that share an attribute;
    text relevance only over the (index-found) sessions whose text matches. A session's total
    is the sum, so the overall best are among the best by attributes plus the text matches.
    """
    pool = _pool(user)
    attribute_score = _score(criteria)
    scores: dict[int, float] = {}
    attr_filter = _prefilter(criteria)
    if attr_filter is not None or not criteria.text:
        best = _best_by_attributes(pool, criteria, attribute_score, attr_filter, limit)
        scores.update(best)
    if criteria.text:
        relevance = (
            pool.filter(text_search.text_filter(criteria.text))
            .annotate(relevance=text_search.relevance(criteria.text), score=attribute_score)
            # Among the text matches, the best by attributes; the database then computes the
            # (costly) relevance only for those it returns, not for every match.
            .order_by("-score", "-started_at")
            .values_list("pk", "relevance", "score")[:TEXT_MATCHES]
        )
        for pk, rel, score in relevance:
            scores[pk] = float(score) + WEIGHTS["text"] * min(1.0, float(rel or 0))
    positive = {pk: sc for pk, sc in scores.items() if sc > 0}
    return list(_cut(positive, limit).items())


def _top(qs, score, limit: int) -> list[tuple[int, float]]:
    return [
        (pk, float(value))
        for pk, value in qs.annotate(score=score)
        .order_by("-score", "-started_at")
        .values_list("pk", "score")[:limit]
    ]


def _cut(scores: dict[int, float], limit: int) -> dict[int, float]:
    """The `limit` best; ties go to the newer session (larger id, as sessions are logged in
    order — close enough for a tie-break, and it saves fetching dates)."""
    best = sorted(scores.items(), key=lambda item: (-round(item[1], 9), -item[0]))[:limit]
    return dict(best)


def _best_by_attributes(pool, criteria: Criteria, score, attr_filter, limit: int):
    """The `limit` best sessions by attribute score.

    First among the sessions that share the strongest given attribute (an indexed, narrow
    query). That answer is exact when its last score beats anything a session lacking that
    attribute could reach; otherwise the wide query over every sharing session decides.
    """
    if attr_filter is None:
        return _top(pool, score, limit)
    for name, field_name in (
        ("material_class", "specimen__material_class"),
        ("conductivity", "specimen__conductivity"),
        ("form", "specimen__form"),
    ):
        value = getattr(criteria, name)
        if value:
            narrow = _top(pool.filter(**{field_name: value}), score, limit)
            ceiling = criteria.max_score() - WEIGHTS["text"] * bool(criteria.text) - WEIGHTS[name]
            if len(narrow) == limit and narrow[-1][1] > ceiling:
                return narrow
            break
    return _top(pool.filter(attr_filter), score, limit)


def candidates(user: AbstractBaseUser, criteria: Criteria, limit: int) -> list[InstrumentSession]:
    ranked = _ranked_ids(user, criteria, limit)
    score_of = dict(ranked)
    failure = Flag.objects.filter(
        session=OuterRef("pk"), code__in=FAILURE_CODES, dismissed_at__isnull=True
    )
    analysed = Micrograph.objects.filter(session=OuterRef("pk"), state=AnalysisState.DONE)
    sessions = list(
        InstrumentSession.objects.filter(pk__in=list(score_of))
        .annotate(failed=Exists(failure), analysed=Exists(analysed))
        .select_related("specimen", "coating", "instrument", "operator", "account__group")
        .prefetch_related(
            Prefetch("conditions", queryset=Conditions.objects.order_by("id")),
            Prefetch(
                "flags",
                queryset=Flag.objects.filter(code__in=FAILURE_CODES, dismissed_at__isnull=True),
                to_attr="failure_flags",
            ),
        )
    )
    for session in sessions:
        session.score = score_of[session.pk]
    sessions.sort(key=lambda s: (-round(s.score, 9), -s.started_at.timestamp()))
    return sessions[:limit]


def _outcome(session: InstrumentSession) -> str:
    if session.failed:
        codes = sorted(f.code for f in session.failure_flags)
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
    names = (
        "accelerating_voltage_kv",
        "working_distance_mm",
        "probe_current_na",
        "detector",
        "dwell_time_us",
        "vacuum_mode",
    )
    return [
        {n: getattr(row, n) for n in names if getattr(row, n) not in (None, "")}
        for row in session.conditions.all()
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
    rows = [row for s in sessions for row in s.conditions.all()]

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
        r.accelerating_voltage_kv for r in session.conditions.all() if r.accelerating_voltage_kv
    ]
    return max(values) if values else None


def _failure_sentences(failed: list[InstrumentSession], worked_kv_max: float | None) -> list[str]:
    sentences = []
    charging = [s for s in failed if any(f.code == FlagCode.CHARGING for f in s.failure_flags)]
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
    blurred = [s for s in failed if any(f.code == FlagCode.LOW_RESOLUTION for f in s.failure_flags)]
    if blurred:
        long_wd = [
            s for s in blurred if any((r.working_distance_mm or 0) > 8 for r in s.conditions.all())
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
    pool = candidates(user, criteria, SUMMARY_POOL)
    mine = set(group_ids_of(user))
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
    hits = [_hit(s, criteria, user, mine) for s in pool[:limit]]
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
