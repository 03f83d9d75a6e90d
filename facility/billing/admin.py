"""Admin for billing: tariffs, holidays, statements and their lines.

An adapter only: tariffs are added and changed through services (new versions, no overlap, no
edit once a final statement used them); statements are drafted and finalised by actions that
call the services. A final statement, and every line of it, is read-only here: the change and
delete views refuse (403), whatever the user's permissions.
"""

from __future__ import annotations

from django import forms
from django.contrib import admin, messages
from django.core.exceptions import ValidationError
from django.http import HttpRequest, HttpResponse
from simple_history.admin import SimpleHistoryAdmin

from facility.billing import exports, queries, services
from facility.billing.models import Charge, Holiday, Statement, Tariff
from facility.errors import DomainError

TARIFF_FIELDS = [
    "instrument",
    "rate_category",
    "purpose",
    "hourly_rate",
    "staff_hourly_rate",
    "currency",
    "increment_minutes",
    "minimum_charge",
    "out_of_hours_factor",
    "charge_basis",
    "late_cancellation_share",
    "no_show_share",
    "valid_from",
    "valid_to",
    "note",
]


class TariffForm(forms.ModelForm):
    class Meta:
        model = Tariff
        fields = TARIFF_FIELDS

    def clean(self):
        cleaned = super().clean()
        terms = {k: v for k, v in cleaned.items() if k in services.TARIFF_TERMS and v is not None}
        try:
            services.clean_tariff_terms(terms)
            if self.instance.pk is None and not self.errors:
                services.check_tariff_version(
                    instrument=cleaned["instrument"],
                    rate_category=cleaned["rate_category"],
                    purpose=cleaned["purpose"],
                    valid_from=cleaned["valid_from"],
                    valid_to=cleaned.get("valid_to"),
                )
        except DomainError as exc:
            raise ValidationError(exc.message) from None
        return cleaned


@admin.register(Tariff)
class TariffAdmin(SimpleHistoryAdmin):
    form = TariffForm
    list_display = [
        "instrument",
        "rate_category",
        "purpose",
        "hourly_rate",
        "currency",
        "increment_minutes",
        "minimum_charge",
        "out_of_hours_factor",
        "charge_basis",
        "valid_from",
        "valid_to",
    ]
    list_select_related = ["instrument"]
    list_filter = ["instrument", "rate_category", "purpose", "charge_basis", "currency"]
    search_fields = ["instrument__code", "instrument__name", "note"]
    date_hierarchy = "valid_from"
    history_list_display = ["hourly_rate", "valid_from", "valid_to"]

    def get_readonly_fields(self, request: HttpRequest, obj: Tariff | None = None):
        if obj is not None and queries.tariff_is_used(obj):
            return TARIFF_FIELDS  # used on a final statement: add a new version instead
        if obj is not None:
            return ["instrument", "rate_category", "purpose"]
        return []

    def has_delete_permission(self, request: HttpRequest, obj: Tariff | None = None) -> bool:
        if obj is not None and obj.charges.exists():
            return False
        return super().has_delete_permission(request, obj)

    def save_model(self, request: HttpRequest, obj: Tariff, form, change: bool) -> None:
        data = {k: v for k, v in form.cleaned_data.items() if k in TARIFF_FIELDS}
        try:
            if change:
                terms = {k: v for k, v in data.items() if k in services.TARIFF_TERMS}
                saved = services.update_tariff(tariff=obj, by=request.user, **terms)
            else:
                saved = services.add_tariff(by=request.user, **data)
        except DomainError as exc:
            # Raced past the form's checks (e.g. a concurrent version): say so, change nothing.
            messages.error(request, exc.message)
            raise _Refused from exc
        obj.pk = saved.pk

    def changeform_view(self, request, object_id=None, form_url="", extra_context=None):
        try:
            return super().changeform_view(request, object_id, form_url, extra_context)
        except _Refused:
            return HttpResponse(status=409, content="Refused; see the message above.")


class _Refused(Exception):
    pass


@admin.register(Holiday)
class HolidayAdmin(admin.ModelAdmin):
    list_display = ["day", "name"]
    search_fields = ["name"]
    date_hierarchy = "day"


class ChargeInline(admin.TabularInline):
    model = Charge
    fk_name = "statement"
    extra = 0
    can_delete = False
    show_change_link = False
    fields = [
        "position",
        "kind",
        "starts_at",
        "instrument",
        "user",
        "purpose",
        "billed_minutes",
        "out_of_hours_minutes",
        "staff_minutes",
        "hourly_rate",
        "amount",
        "currency",
        "description",
    ]
    readonly_fields = fields

    def has_add_permission(self, request: HttpRequest, obj=None) -> bool:
        return False

    def has_change_permission(self, request: HttpRequest, obj=None) -> bool:
        return False

    def has_delete_permission(self, request: HttpRequest, obj=None) -> bool:
        return False


@admin.register(Statement)
class StatementAdmin(SimpleHistoryAdmin):
    list_display = [
        "account",
        "month",
        "state",
        "reference",
        "total",
        "currency",
        "has_problems",
        "drafted_at",
        "finalised_at",
    ]
    list_select_related = ["account"]
    list_filter = ["state", "month"]
    search_fields = ["account__code", "account__name", "account__group__name"]
    date_hierarchy = "month"
    inlines = [ChargeInline]
    actions = ["redraft", "finalise", "download_csv"]
    readonly_fields = [
        "account",
        "month",
        "state",
        "number",
        "currency",
        "total",
        "checksum",
        "problems",
        "drafted_at",
        "finalised_at",
        "finalised_by",
    ]
    history_list_display = ["state", "total", "number"]

    @admin.display(boolean=True, description="problems")
    def has_problems(self, obj: Statement) -> bool:
        return bool(obj.problems)

    def has_add_permission(self, request: HttpRequest) -> bool:
        return False  # statements come from drafting, never typed in

    def has_change_permission(self, request: HttpRequest, obj: Statement | None = None) -> bool:
        if obj is not None and obj.is_final:
            return False
        return super().has_change_permission(request, obj)

    def has_delete_permission(self, request: HttpRequest, obj: Statement | None = None) -> bool:
        if obj is not None and obj.is_final:
            return False
        return super().has_delete_permission(request, obj)

    def get_deleted_objects(self, objs, request: HttpRequest):
        deleted, counts, perms_needed, protected = super().get_deleted_objects(objs, request)
        # A draft's lines go with it; they have no delete permission of their own on purpose.
        perms_needed.discard(Charge._meta.verbose_name)
        return deleted, counts, perms_needed, protected

    def delete_queryset(self, request: HttpRequest, queryset) -> None:
        # The bulk "delete selected" action asks per object only for the page; hold it here too.
        finals = queryset.filter(state="final")
        if finals.exists():
            messages.error(request, "Final statements cannot be deleted; nothing was deleted.")
            return
        super().delete_queryset(request, queryset)

    def save_model(self, request: HttpRequest, obj: Statement, form, change: bool) -> None:
        # Every field is read-only: a draft follows the data and changes only by redrafting.
        return

    @admin.action(description="Redraft the selected draft statements from the data")
    def redraft(self, request: HttpRequest, queryset) -> None:
        done = 0
        for statement in queryset.select_related("account"):
            try:
                services.draft_statement(
                    account=statement.account, month=statement.month, by=request.user
                )
                done += 1
            except DomainError as exc:
                messages.error(request, f"{statement}: {exc.message}")
        messages.success(request, f"Redrafted {done} statement(s).")

    @admin.action(description="Finalise the selected statements (numbers them; irreversible)")
    def finalise(self, request: HttpRequest, queryset) -> None:
        done = 0
        for statement in queryset.order_by("month", "account__code"):
            try:
                services.finalise_statement(statement=statement, by=request.user)
                done += 1
            except DomainError as exc:
                messages.error(request, f"{statement}: {exc.message}")
        messages.success(request, f"Finalised {done} statement(s).")

    @admin.action(description="Download the selected statements as CSV")
    def download_csv(self, request: HttpRequest, queryset) -> HttpResponse:
        response = HttpResponse(content_type="text/csv; charset=utf-8")
        response["Content-Disposition"] = 'attachment; filename="statements.csv"'
        rows = (
            row
            for statement in queryset.order_by("number", "account__code")
            for row in exports.statement_rows(statement)
        )
        exports.write_csv(rows, exports.STATEMENT_COLUMNS, response)
        return response


@admin.register(Charge)
class ChargeAdmin(admin.ModelAdmin):
    """Lines are looked up here, never edited: drafting writes them, adjustments go via services."""

    list_display = [
        "statement",
        "position",
        "kind",
        "starts_at",
        "instrument",
        "user",
        "amount",
        "currency",
    ]
    list_select_related = ["statement", "statement__account", "instrument", "user"]
    list_filter = ["kind", "statement__state", "instrument"]
    search_fields = ["statement__account__code", "user__username", "description", "reason"]
    raw_id_fields = ["statement", "session", "booking", "tariff", "corrects"]

    def has_add_permission(self, request: HttpRequest) -> bool:
        return False

    def has_change_permission(self, request: HttpRequest, obj: Charge | None = None) -> bool:
        return False

    def has_delete_permission(self, request: HttpRequest, obj: Charge | None = None) -> bool:
        return False
