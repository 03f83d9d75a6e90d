"""Billing pages: the month's statements, one statement with its lines and exports, finalising
with a confirmation step, adjustments on drafts, and the usage report with its charts.

Who sees what is billing's own rule (queries.visible_to): staff and the finance office every
statement, group leaders their groups' accounts; another account's statement is a 404. Writes
(drafting, finalising, adjustments) are staff's and go through billing.services.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal
from typing import Any

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.db import transaction
from django.db.models import Count
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_GET, require_POST

from facility.billing import charts, exports, queries, services, tasks, usage
from facility.billing.forms import AdjustmentForm, FinaliseForm, MonthForm
from facility.billing.models import Charge, ChargeKind, Statement
from facility.billing.months import first_of, month_bounds, next_month, previous_month
from facility.billing.pdf import statement_pdf
from facility.bookings.forms import show_refusal
from facility.errors import DomainError, NotAllowed
from facility.people.queries import is_staff, led_group_ids

CHART_MONTHS = 12  # the usage charts show the year up to the chosen month
DIMENSIONS = (("group", "Group"), ("rate_category", "Rate category"), ("purpose", "Purpose"))


def _tz() -> dt.tzinfo:
    return timezone.get_default_timezone()


def reads_statements(user) -> bool:
    """Whether the statements pages have anything for this person."""
    return queries.sees_all_billing(user) or bool(led_group_ids(user))


def _month_from(request: HttpRequest, default: dt.date) -> tuple[dt.date, MonthForm]:
    """The month in the address (?month=2027-03), or `default` when it is absent or unreadable."""
    if request.GET.get("month"):
        form = MonthForm(request.GET)
        if form.is_valid():
            return form.cleaned_data["month"], form
    return default, MonthForm(initial={"month": default})


def last_month() -> dt.date:
    """The month whose statements are being prepared: the one before today (facility time)."""
    return previous_month(first_of(timezone.localdate()))


def _download(content: bytes | str, content_type: str, name: str) -> HttpResponse:
    response = HttpResponse(content, content_type=content_type)
    response["Content-Disposition"] = f'attachment; filename="{name}"'
    response["Cache-Control"] = "private, no-store"
    return response


def _strip_prolog(svg: str) -> str:
    return svg[svg.find("<svg") :]


# --- The month's statements -------------------------------------------------------------------


@login_required
@require_GET
def statement_list(request: HttpRequest) -> HttpResponse:
    user = request.user
    if not reads_statements(user):
        raise PermissionDenied("Statements are for facility staff, finance and group leaders.")
    month, form = _month_from(request, last_month())
    statements = list(
        queries.visible_to(user)
        .filter(month=month)
        .annotate(line_count=Count("lines"))
        .order_by("state", "account__code")
    )
    totals: dict[str, Decimal] = {}
    for s in statements:
        if s.currency:
            totals[s.currency] = totals.get(s.currency, Decimal("0.00")) + s.total
    _, month_end = month_bounds(month, _tz())
    return render(
        request,
        "billing/statement_list.html",
        {
            "month": month,
            "month_form": form,
            "previous": previous_month(month),
            "next": next_month(month),
            "statements": statements,
            "drafts": sum(1 for s in statements if not s.is_final),
            "finals": sum(1 for s in statements if s.is_final),
            "with_problems": sum(1 for s in statements if s.problems),
            "totals": sorted(totals.items()),
            "month_over": timezone.now() >= month_end,
            "staff": is_staff(user),
            "sees_all": queries.sees_all_billing(user),
            "nav": "billing",
        },
    )


@login_required
@require_POST
def draft_month(request: HttpRequest) -> HttpResponse:
    """Draft (again) every account's statement of a month, as the month-end job does."""
    if not is_staff(request.user):
        raise PermissionDenied("Only facility staff can draft statements.")
    form = MonthForm(request.POST)
    if not form.is_valid():
        messages.error(request, "Choose the month to draft.")
        return redirect("statement-list")
    month = form.cleaned_data["month"]
    # The job takes the month as text and runs after the request's transaction commits; with
    # no broker (development, tests) it runs at once, in-process.
    transaction.on_commit(lambda: tasks.draft_month.delay(f"{month:%Y-%m}"))
    messages.success(
        request,
        f"Drafting the statements of {month:%B %Y}: drafts are rebuilt from the logbook and "
        "bookings, adjustments are kept, final statements stay as they are.",
    )
    return redirect(f"{reverse('statement-list')}?month={month:%Y-%m}")


@login_required
@require_GET
def month_export(request: HttpRequest) -> HttpResponse:
    """The month's lines of every account, for the finance office (finals; drafts on request)."""
    if not queries.sees_all_billing(request.user):
        raise PermissionDenied("The month's export is for facility staff and finance.")
    month, _ = _month_from(request, last_month())
    drafts = request.GET.get("drafts") == "1"
    text = exports.month_csv(month, include_drafts=drafts)
    name = f"statements-{month:%Y-%m}{'-with-drafts' if drafts else ''}.csv"
    return _download(text, "text/csv; charset=utf-8", name)


# --- One statement ----------------------------------------------------------------------------


def _statement(request: HttpRequest, pk: int) -> Statement:
    return get_object_or_404(queries.visible_to(request.user), pk=pk)


def _statement_page(
    request: HttpRequest, statement: Statement, *, status: int = 200, **extra: Any
) -> HttpResponse:
    lines = list(queries.lines_of(statement))
    for line in lines:
        line.billed = dt.timedelta(minutes=line.billed_minutes) if line.billed_minutes else None
    staff = is_staff(request.user)
    context: dict[str, Any] = {
        "statement": statement,
        "lines": lines,
        "staff": staff,
        "intact": queries.checksum_matches(statement) if statement.is_final else None,
        "adjustment_form": AdjustmentForm(prefix="adj") if staff else None,
        "nav": "billing",
    }
    context.update(extra)
    return render(request, "billing/statement_detail.html", context, status=status)


@login_required
@require_GET
def statement_detail(request: HttpRequest, pk: int) -> HttpResponse:
    return _statement_page(request, _statement(request, pk))


@login_required
@require_GET
def statement_csv(request: HttpRequest, pk: int) -> HttpResponse:
    statement = _statement(request, pk)
    label = statement.reference or "draft"
    name = f"statement-{statement.account.code}-{statement.month:%Y-%m}-{label}.csv"
    return _download(exports.statement_csv(statement), "text/csv; charset=utf-8", name)


@login_required
@require_GET
def statement_pdf_download(request: HttpRequest, pk: int) -> HttpResponse:
    statement = _statement(request, pk)
    label = statement.reference or "draft"
    name = f"statement-{statement.account.code}-{statement.month:%Y-%m}-{label}.pdf"
    return _download(statement_pdf(statement), "application/pdf", name)


def _finalise_context(statement: Statement) -> dict[str, Any]:
    _, month_end = month_bounds(statement.month, _tz())
    return {
        "statement": statement,
        "line_count": statement.lines.count(),
        "month_over": timezone.now() >= month_end,
        "form": FinaliseForm(initial={"expected_checksum": queries.checksum_of(statement)}),
        "nav": "billing",
    }


@login_required
def finalise(request: HttpRequest, pk: int) -> HttpResponse:
    """GET: what finalising will seal, and the button. POST: seal it (staff only)."""
    statement = _statement(request, pk)
    if not is_staff(request.user):
        raise PermissionDenied("Only facility staff can finalise statements.")
    if statement.is_final:
        messages.info(request, f"Statement {statement.reference} is already final.")
        return redirect("statement-detail", pk=statement.pk)
    if request.method != "POST":
        return render(request, "billing/finalise.html", _finalise_context(statement))
    form = FinaliseForm(request.POST)
    if not form.is_valid():
        messages.error(request, "Open the statement again and confirm from its review page.")
        return redirect("statement-finalise", pk=statement.pk)
    try:
        final = services.finalise_statement(
            statement=statement,
            by=request.user,
            expected_checksum=form.cleaned_data["expected_checksum"],
        )
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        context = _finalise_context(statement)
        context["refusal"] = error.message
        return render(request, "billing/finalise.html", context, status=error.http_status)
    messages.success(
        request,
        f"Statement {final.reference} finalised: {final.total} {final.currency} for "
        f"{final.account.code}, {final.month:%B %Y}. It can no longer change.",
    )
    return redirect("statement-detail", pk=final.pk)


@login_required
@require_POST
def add_adjustment(request: HttpRequest, pk: int) -> HttpResponse:
    statement = _statement(request, pk)
    if not is_staff(request.user):
        raise PermissionDenied("Only facility staff can add adjustments.")
    form = AdjustmentForm(request.POST, prefix="adj")
    if not form.is_valid():
        return _statement_page(request, statement, status=400, adjustment_form=form)
    try:
        services.add_adjustment(
            account=statement.account,
            amount=form.cleaned_data["amount"],
            reason=form.cleaned_data["reason"],
            by=request.user,
            month=statement.month,
        )
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        show_refusal(form, error)
        return _statement_page(request, statement, status=error.http_status, adjustment_form=form)
    messages.success(request, "Adjustment added; the draft's total is updated.")
    return redirect(reverse("statement-detail", args=[statement.pk]) + "#lines")


@login_required
@require_POST
def remove_adjustment(request: HttpRequest, pk: int, line: int) -> HttpResponse:
    statement = _statement(request, pk)
    if not is_staff(request.user):
        raise PermissionDenied("Only facility staff can remove adjustments.")
    charge = get_object_or_404(Charge, pk=line, statement=statement, kind=ChargeKind.ADJUSTMENT)
    try:
        services.remove_adjustment(line=charge, by=request.user)
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        messages.error(request, error.message)
    else:
        messages.success(request, "Adjustment removed.")
    return redirect(reverse("statement-detail", args=[statement.pk]) + "#lines")


# --- Usage ------------------------------------------------------------------------------------


def _usage_reader(request: HttpRequest) -> None:
    # Usage across every group: the same readers as all statements (staff and finance).
    if not queries.sees_all_billing(request.user):
        raise PermissionDenied("The usage report is for facility staff and finance.")


def _chart_range(month: dt.date) -> tuple[dt.date, dt.date]:
    first = month
    for _ in range(CHART_MONTHS - 1):
        first = previous_month(first)
    return first, month


@login_required
@require_GET
def usage_report(request: HttpRequest) -> HttpResponse:
    _usage_reader(request)
    month, form = _month_from(request, last_month())
    dimension = request.GET.get("by", "group")
    if dimension not in dict(DIMENSIONS):
        dimension = "group"
    rows = usage.instrument_usage(month)
    query = f"month={month:%Y-%m}"
    return render(
        request,
        "billing/usage.html",
        {
            "month": month,
            "month_form": form,
            "previous": previous_month(month),
            "next": next_month(month),
            "rows": [
                (r, None if r.utilisation is None else round(r.utilisation * 100)) for r in rows
            ],
            "dimension": dimension,
            "dimensions": DIMENSIONS,
            "breakdown": usage.usage_breakdown(month, dimension),
            "top": usage.top_users(month, limit=10),
            "hours_chart": f"{reverse('usage-chart', args=['hours'])}?{query}",
            "utilisation_chart": f"{reverse('usage-chart', args=['utilisation'])}?{query}",
            "query": query,
            "nav": "billing",
        },
    )


@login_required
@require_GET
def usage_chart(request: HttpRequest, kind: str) -> HttpResponse:
    """The year up to the month as SVG: hours used per month, or utilisation."""
    _usage_reader(request)
    month, _ = _month_from(request, last_month())
    first, last = _chart_range(month)
    if kind == "hours":
        svg = charts.monthly_hours_chart(usage.monthly_hours(first, last))
    elif kind == "utilisation":
        svg = charts.utilisation_chart(usage.utilisation_series(first, last))
    else:
        return HttpResponse(status=404)
    response = HttpResponse(svg, content_type="image/svg+xml")
    response["Cache-Control"] = "private, max-age=300"
    return response


@login_required
@require_GET
def usage_export(request: HttpRequest, what: str) -> HttpResponse:
    _usage_reader(request)
    month, _ = _month_from(request, last_month())
    if what == "instruments":
        text = exports.usage_csv(month)
    elif what in dict(DIMENSIONS):
        text = exports.breakdown_csv(month, what)  # type: ignore[arg-type]
    elif what == "top-users":
        text = exports.top_users_csv(month)
    else:
        return HttpResponse(status=404)
    return _download(text, "text/csv; charset=utf-8", f"usage-{what}-{month:%Y-%m}.csv")


# --- Shown on other apps' pages (through billing's template tags) --------------------------
