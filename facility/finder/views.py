"""Finder pages: what worked on similar specimens, starting a session from it, and the staff's
charging report.

Thin: the search form is parsed into the finder's criteria, `queries.search` does the work, and
"start from these settings" hands the suggestion to the logbook's `add_conditions`. The search
lives in the address (GET), so a result can be bookmarked or sent to a colleague.
"""

from __future__ import annotations

from typing import Any
from urllib.parse import urlencode

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.views.decorators.http import require_GET, require_POST

from facility.errors import DomainError, NotAllowed
from facility.finder import charging_report
from facility.finder.forms import SearchForm, StartForm, open_sessions_of
from facility.finder.queries import Result, micrographs_shown_to, search
from facility.instruments.models import VacuumMode
from facility.logbook import downloads
from facility.logbook import queries as logbook_queries
from facility.logbook import services as logbook_services
from facility.logbook.models import ConditionsSource, FlagCode
from facility.people.queries import is_staff

SUGGESTION_LABEL = "Finder suggestion"

# How each summarised setting reads on the page: (key, label, unit).
NUMBERS = (
    ("accelerating_voltage_kv", "Accelerating voltage", "kV"),
    ("working_distance_mm", "Working distance", "mm"),
    ("probe_current_na", "Probe current", "nA"),
    ("coating_thickness_nm", "Coating thickness", "nm"),
)
CHOICES = (
    ("detector", "Detector"),
    ("coating", "Coating"),
    ("vacuum_mode", "Vacuum mode"),
)
SUGGESTED = (
    ("accelerating_voltage_kv", "Accelerating voltage", "kV"),
    ("working_distance_mm", "Working distance", "mm"),
    ("probe_current_na", "Probe current", "nA"),
    ("detector", "Detector", ""),
    ("vacuum_mode", "Vacuum mode", ""),
)
CONDITION_UNITS = {
    "accelerating_voltage_kv": ("", "kV"),
    "working_distance_mm": ("WD", "mm"),
    "probe_current_na": ("", "nA"),
    "dwell_time_us": ("dwell", "µs"),
}


def _vacuum(value: str) -> str:
    return VacuumMode(value).label if value in VacuumMode.values else value


def _outcome(code: str) -> tuple[str, str]:
    """(words, badge tone) for a hit's outcome."""
    if code == "worked":
        return "worked: no image flagged", "ok"
    if code == "not analysed":
        return "no analysed images", "info"
    if code in FlagCode.values:
        return FlagCode(code).label.lower(), "problem"
    return "flagged", "problem"


def _number(value: float) -> str:
    return f"{value:.3g}"


def summary_rows(result: Result) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """The summary's settings as lines: numbers with median and range, choices with counts."""
    settings = result.summary.settings
    numbers = []
    for key, label, unit in NUMBERS:
        stats = settings.get(key)
        if stats:
            numbers.append(
                {
                    "label": label,
                    "median": f"{_number(stats['median'])} {unit}",
                    "range": f"{_number(stats['min'])}–{_number(stats['max'])} {unit}",
                    "count": stats["count"],
                }
            )
    choices = []
    for key, label in CHOICES:
        counted = settings.get(key) or []
        if counted:
            shown = [(_vacuum(v) if key == "vacuum_mode" else v, n) for v, n in counted]
            choices.append({"label": label, "values": shown})
    return numbers, choices


def suggestion_rows(suggestion: dict[str, Any]) -> list[tuple[str, str]]:
    rows = []
    for key, label, unit in SUGGESTED:
        if key in suggestion:
            value = suggestion[key]
            if key == "vacuum_mode":
                text = _vacuum(value)
            elif isinstance(value, float | int):
                text = f"{_number(value)} {unit}"
            else:
                text = str(value)
            rows.append((label, text))
    return rows


def condition_text(row: dict[str, Any]) -> str:
    """One logged set of conditions in a line: '3 kV, WD 5 mm, SE, high vacuum'."""
    parts = []
    for key, (prefix, unit) in CONDITION_UNITS.items():
        if key in row:
            parts.append(f"{prefix} {_number(row[key])} {unit}".strip())
    if row.get("detector"):
        parts.append(str(row["detector"]))
    if row.get("vacuum_mode"):
        parts.append(_vacuum(row["vacuum_mode"]).lower())
    return ", ".join(parts) or "no settings logged"


def prefill_query(suggestion: dict[str, Any]) -> str:
    """The address part that fills a session page's conditions form with the suggestion (the
    session page reads `suggested=1` and the form's own field names)."""
    values = {"suggested": "1", "cond-label": SUGGESTION_LABEL}
    values.update({f"cond-{key}": value for key, value in suggestion.items()})
    return urlencode(values)


def _results(request: HttpRequest, result: Result) -> dict[str, Any]:
    user = request.user
    visible = [h.session_id for h in result.hits if h.visible]
    # Hits of sharing groups are shown, but their session pages belong to their own group.
    linkable = (
        set(logbook_queries.visible_to(user).filter(pk__in=visible).values_list("pk", flat=True))
        if visible
        else set()
    )
    hits = []
    for hit in result.hits:
        words, tone = _outcome(hit.outcome)
        hits.append(
            {
                "hit": hit,
                "outcome": words,
                "tone": tone,
                "conditions": [condition_text(row) for row in hit.conditions],
                "vacuum": _vacuum(hit.vacuum_mode),
                "link": reverse("session-detail", args=[hit.session_id])
                if hit.session_id in linkable
                else None,
                # Thumbnails only of hits whose details the person may see.
                "thumbnails": hit.micrograph_ids if hit.visible else [],
            }
        )
    numbers, choices = summary_rows(result)
    open_sessions = list(open_sessions_of(user))
    query = prefill_query(result.suggestion) if result.suggestion else ""
    return {
        "result": result,
        "summary": result.summary,
        "numbers": numbers,
        "choices": choices,
        "hits": hits,
        "suggestion": suggestion_rows(result.suggestion),
        "open_sessions": [
            (s, f"{reverse('session-detail', args=[s.pk])}?{query}#conditions")
            for s in open_sessions
        ],
        "search_query": request.GET.urlencode(),
    }


def _searched(request: HttpRequest) -> bool:
    return any(name in request.GET for name in SearchForm.base_fields)


@login_required
@require_GET
def finder(request: HttpRequest) -> HttpResponse:
    context: dict[str, Any] = {"nav": "finder"}
    status = 200
    if _searched(request):
        form = SearchForm(request.GET)
        if form.is_valid() and form.criteria is not None:
            context.update(_results(request, search(request.user, form.criteria)))
        else:
            status = 400
    else:
        form = SearchForm()
    context["form"] = form
    return render(request, "finder/finder.html", context, status=status)


@login_required
@require_POST
def start_from_suggestion(request: HttpRequest) -> HttpResponse:
    """Copy the suggestion of the search in the address into one of the person's open sessions.

    The suggestion is computed again here, from the same search, rather than taken from the
    form: what lands in the log is what the finder says, not what a page was made to post.
    """
    search_form = SearchForm(request.GET)
    back = f"{reverse('finder')}?{request.GET.urlencode()}"
    if not search_form.is_valid() or search_form.criteria is None:
        messages.error(request, "The search behind this suggestion is not valid; search again.")
        return redirect(back)
    form = StartForm(request.POST, user=request.user)
    if not form.is_valid():
        messages.error(request, "Choose one of your open sessions; check in first if none is open.")
        return redirect(back)
    session = form.cleaned_data["session"]
    suggestion = search(request.user, search_form.criteria).suggestion
    if not suggestion:
        messages.error(request, "Nothing that worked was found, so there is nothing to copy.")
        return redirect(back)
    try:
        logbook_services.add_conditions(
            session=session,
            by=request.user,
            source=ConditionsSource.SUGGESTED,
            label=SUGGESTION_LABEL,
            **suggestion,
        )
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        messages.error(request, error.message)
        return redirect(back)
    messages.success(
        request,
        f"Suggested conditions copied into your session on {session.instrument.name}; "
        "change what you set differently.",
    )
    return redirect(reverse("session-detail", args=[session.pk]) + "#conditions")


@login_required
@require_GET
def hit_thumbnail(request: HttpRequest, pk: int) -> HttpResponse:
    """A hit's thumbnail. The logbook's own thumbnail address serves only one's own groups'
    images; a sharing group's hit needs the finder's wider rule."""
    return downloads.thumbnail_response(
        get_object_or_404(micrographs_shown_to(request.user), pk=pk)
    )


@login_required
@require_GET
def charging(request: HttpRequest) -> HttpResponse:
    if not is_staff(request.user):
        raise PermissionDenied("The charging report is for facility staff.")
    cells = charging_report.charging_table()
    svg = ""
    if cells:
        text = charging_report.heat_map_svg(cells)
        # Inline SVG: drop the XML prolog and DOCTYPE, which have no place inside HTML.
        svg = text[text.find("<svg") :]
    rows = [
        {
            "cell": c,
            "vacuum": _vacuum(c.vacuum_mode),
            "percent": round(100 * c.rate),
        }
        for c in cells
    ]
    return render(
        request,
        "finder/charging.html",
        {
            "rows": rows,
            "svg": svg,
            "sessions": sum(c.sessions for c in cells),
            "charging": sum(c.charging for c in cells),
            "nav": "finder",
        },
    )
