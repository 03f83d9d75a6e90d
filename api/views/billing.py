"""Billing for scripts: statements and their exports, month-end drafting and finalising,
adjustments, "my costs", and the usage report.

Rows come from billing's own scoping (queries.visible_to, lines_visible_to): staff and finance
see every statement, group leaders their groups' accounts, everyone else none — though each
person sees their own lines. Writes are the billing services', which refuse a non-staff caller
(403) and any change to a final statement (409, code `closed`). Billing is per account: a token's
instrument binding does not narrow it.
"""

from __future__ import annotations

from django.http import HttpResponse
from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema, extend_schema_view
from rest_framework import status
from rest_framework.decorators import action
from rest_framework.request import Request
from rest_framework.response import Response

from api.filters import LineFilter, Ordering, StatementFilter
from api.serializers.billing import (
    MONTH_PATTERN,
    AdjustmentIn,
    DraftMonthIn,
    DraftRunOut,
    FinaliseIn,
    LineOut,
    StatementOut,
    UsageOut,
    parse_month,
)
from api.views.base import ApiViewSet, visible_or_404
from api.views.micrographs import FilesAnyway
from api.views.people import accounts_visible_to
from facility.billing import exports, queries, services, usage
from facility.billing.models import Charge, Statement
from facility.billing.pdf import statement_pdf
from facility.errors import NotAllowed


def _download(content: bytes | str, content_type: str, name: str) -> HttpResponse:
    response = HttpResponse(content, content_type=content_type)
    response["Content-Disposition"] = f'attachment; filename="{name}"'
    response["X-Content-Type-Options"] = "nosniff"
    return response


def _file_name(statement: Statement) -> str:
    return f"statement-{statement.account.code}-{statement.month:%Y-%m}-" + (
        statement.reference or "draft"
    )


@extend_schema_view(
    list=extend_schema(
        summary="List the statements you may see",
        description="Staff and finance: all; group leaders: their groups' accounts; others none.",
        responses=StatementOut,
    ),
    retrieve=extend_schema(summary="Show one statement", responses=StatementOut),
)
class StatementViewSet(ApiViewSet):
    queryset = Statement.objects.none()
    filter_backends = [DjangoFilterBackend, Ordering]
    filterset_class = StatementFilter
    ordering_fields = ["month", "id"]
    ordering = ("-month", "-id")

    def get_queryset(self):
        return queries.visible_to(self.request.user)

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), StatementOut)

    def retrieve(self, request: Request, pk: str) -> Response:
        return Response(self.out(StatementOut, self.get_object()))

    @extend_schema(
        summary="List a statement's lines in printed order",
        description="Every line at once (a statement holds one account's month).",
        responses=LineOut(many=True),
    )
    @action(detail=True, methods=["get"], pagination_class=None)
    def lines(self, request: Request, pk: str) -> Response:
        return Response(self.out(LineOut, queries.lines_of(self.get_object()), many=True))

    @extend_schema(
        summary="Download a statement as CSV",
        description="RFC 4180, the columns facility/billing/exports.py lists; money with '.' "
        "as the decimal mark.",
        responses={(200, "text/csv"): OpenApiTypes.BINARY},
    )
    @action(detail=True, methods=["get"], content_negotiation_class=FilesAnyway)
    def csv(self, request: Request, pk: str) -> HttpResponse:
        statement = self.get_object()
        return _download(
            exports.statement_csv(statement),
            "text/csv; charset=utf-8",
            f"{_file_name(statement)}.csv",
        )

    @extend_schema(
        summary="Download a statement as PDF",
        responses={(200, "application/pdf"): OpenApiTypes.BINARY},
    )
    @action(detail=True, methods=["get"], content_negotiation_class=FilesAnyway)
    def pdf(self, request: Request, pk: str) -> HttpResponse:
        statement = self.get_object()
        return _download(
            statement_pdf(statement), "application/pdf", f"{_file_name(statement)}.pdf"
        )

    @extend_schema(
        summary="Finalise a draft statement (staff)",
        description="Rebuilds it from the data one last time, numbers it, checksums it and "
        "freezes it. 409 when the month is not over, the draft has problems, the lines changed "
        "since `expected_checksum`, or it is final already.",
        request=FinaliseIn,
        responses=StatementOut,
    )
    @action(detail=True, methods=["post"])
    def finalise(self, request: Request, pk: str) -> Response:
        data = self.parse(FinaliseIn)
        statement = services.finalise_statement(
            statement=self.get_object(),
            by=request.user,
            expected_checksum=data.get("expected_checksum"),
        )
        return Response(
            self.out(StatementOut, queries.visible_to(request.user).get(pk=statement.pk))
        )

    @extend_schema(
        summary="Draft every account's statement for a month (staff)",
        description="Rebuilds the drafts from the logbook and bookings, keeping adjustments; "
        "final statements are left as they are (listed in `skipped_final`).",
        request=DraftMonthIn,
        responses=DraftRunOut,
    )
    @action(detail=False, methods=["post"], url_path="draft-month")
    def draft_month(self, request: Request) -> Response:
        data = self.parse(DraftMonthIn)
        run = services.draft_month(month=data["month"], by=request.user)
        return Response(self.out(DraftRunOut, run.as_dict()))


@extend_schema_view(
    list=extend_schema(
        summary="List statement lines you may see",
        description='Your own lines ("my costs"), and for group leaders every line of their '
        "groups' statements; staff and finance all.",
        responses=LineOut,
    ),
)
class LineViewSet(ApiViewSet):
    queryset = Charge.objects.none()
    filter_backends = [DjangoFilterBackend, Ordering]
    filterset_class = LineFilter
    ordering_fields = ["id"]
    ordering = ("-id",)

    def get_queryset(self):
        return queries.lines_visible_to(self.request.user).select_related("created_by")

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), LineOut)


@extend_schema_view(
    create=extend_schema(
        summary="Add an adjustment line (staff)",
        description="A credit (negative) or debit (positive) with its reason, on the draft "
        "statement of `month`. A correction of a final statement (`corrects`) goes on a later "
        "month's statement; a final statement itself never changes (409).",
        request=AdjustmentIn,
        responses={201: LineOut},
    ),
    destroy=extend_schema(
        summary="Remove an adjustment from a draft statement (staff)",
        responses={204: None},
    ),
)
class AdjustmentViewSet(ApiViewSet):
    queryset = Charge.objects.none()

    def get_queryset(self):
        return queries.lines_visible_to(self.request.user)

    def create(self, request: Request) -> Response:
        data = self.parse(AdjustmentIn)
        account = visible_or_404(
            accounts_visible_to(request.user), "account", "account", code=data["account"]
        )
        corrects = None
        if data.get("corrects"):
            corrects = visible_or_404(
                queries.visible_to(request.user), "corrects", "statement", pk=data["corrects"]
            )
        line = services.add_adjustment(
            account=account,
            amount=data["amount"],
            reason=data["reason"],
            by=request.user,
            month=data.get("month"),
            corrects=corrects,
            currency=data.get("currency"),
        )
        return Response(self.out(LineOut, line), status=status.HTTP_201_CREATED)

    def destroy(self, request: Request, pk: str) -> Response:
        services.remove_adjustment(line=self.get_object(), by=request.user)
        return Response(status=status.HTTP_204_NO_CONTENT)


MONTH = OpenApiParameter(
    "month", OpenApiTypes.STR, OpenApiParameter.PATH, pattern=MONTH_PATTERN, description="YYYY-MM."
)


@extend_schema_view(
    retrieve=extend_schema(
        summary="Usage per instrument in a month (staff, finance)",
        description="Booked, used, no-show, late-cancelled and downtime hours, bookable hours "
        "from the facility calendar, and utilisation (used / bookable).",
        parameters=[MONTH],
        responses=UsageOut,
    ),
)
class UsageViewSet(ApiViewSet):
    """The month's usage report; the pages' rule: facility staff and finance only."""

    queryset = Statement.objects.none()
    lookup_field = "month"
    lookup_value_regex = "[0-9]{4}-[0-9]{2}"
    # The month in the path is parsed like input: 2031-13 is a 400 naming `month`.
    query_actions = ("retrieve", "csv")

    def initial(self, request: Request, *args, **kwargs) -> None:
        super().initial(request, *args, **kwargs)
        if not queries.sees_all_billing(request.user):
            raise NotAllowed("The usage report is for facility staff and finance.")

    def retrieve(self, request: Request, month: str) -> Response:
        first = parse_month(month)
        body = {"month": first, "instruments": usage.instrument_usage(first)}
        return Response(self.out(UsageOut, body))

    @extend_schema(
        summary="Usage per instrument in a month as CSV (staff, finance)",
        parameters=[MONTH],
        responses={(200, "text/csv"): OpenApiTypes.BINARY},
    )
    @action(detail=True, methods=["get"], content_negotiation_class=FilesAnyway)
    def csv(self, request: Request, month: str) -> HttpResponse:
        first = parse_month(month)
        return _download(exports.usage_csv(first), "text/csv; charset=utf-8", f"usage-{month}.csv")
