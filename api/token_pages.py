"""The API token page: people make and revoke their own tokens; staff issue upload-only tokens for
an instrument's acquisition PC and can stop anyone's token.

Thin: the forms parse, `api.tokens` issues and revokes. A new secret is shown once, in the answer
to the form that made it, and never again (only its digest is stored).
"""

from __future__ import annotations

from typing import Any

from django import forms
from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.utils import timezone
from django.views.decorators.http import require_GET, require_POST

from api import tokens
from api.models import Scope, TokenKind
from facility.bookings.forms import show_refusal
from facility.errors import DomainError, NotAllowed
from facility.instruments.models import Instrument
from facility.people.queries import is_staff


class TokenForm(forms.Form):
    name = forms.CharField(
        label="What will use it",
        max_length=80,
        help_text="For example: analysis notebook, usage spreadsheet.",
    )
    scopes = forms.MultipleChoiceField(
        label="It may",
        choices=Scope.choices,
        initial=[Scope.READ],
        widget=forms.CheckboxSelectMultiple,
    )
    expires_in_days = forms.IntegerField(
        label="Valid for (days)",
        initial=tokens.DEFAULT_LIFETIME_DAYS,
        min_value=1,
        max_value=tokens.MAX_LIFETIME_DAYS,
    )
    instrument = forms.ModelChoiceField(
        label="Only for one instrument",
        required=False,
        queryset=Instrument.objects.filter(is_active=True),
        empty_label="every instrument",
    )


class InstrumentTokenForm(forms.Form):
    instrument = forms.ModelChoiceField(
        label="Instrument", queryset=Instrument.objects.filter(is_active=True)
    )
    name = forms.CharField(
        label="Which PC", max_length=80, help_text="For example: acquisition PC in room 0.14."
    )
    expires_in_days = forms.IntegerField(
        label="Valid for (days)",
        initial=tokens.MAX_LIFETIME_DAYS,
        min_value=1,
        max_value=tokens.MAX_LIFETIME_DAYS,
    )


def _page(request: HttpRequest, *, status: int = 200, **extra: Any) -> HttpResponse:
    user = request.user
    staff = is_staff(user)
    visible = tokens.tokens_visible_to(user)
    now = timezone.now()
    context: dict[str, Any] = {
        "mine": list(visible.filter(user=user)[:100]),
        "others": list(
            visible.exclude(user=user).filter(revoked_at__isnull=True, expires_at__gt=now)[:200]
        )
        if staff
        else [],
        "staff": staff,
        "now": now,
        "form": TokenForm(prefix="token"),
        "instrument_form": InstrumentTokenForm(prefix="pc") if staff else None,
        "nav": "tokens",
    }
    context.update(extra)
    response = render(request, "people/tokens.html", context, status=status)
    # A page that may hold a new secret must not be kept by any cache or the back button.
    response["Cache-Control"] = "no-store"
    return response


@login_required
@require_GET
def token_list(request: HttpRequest) -> HttpResponse:
    return _page(request)


def _refused(form: forms.Form, error: DomainError) -> int:
    if isinstance(error, NotAllowed):
        raise PermissionDenied(error.message)
    show_refusal(form, error)
    return error.http_status


@login_required
@require_POST
def create_token(request: HttpRequest) -> HttpResponse:
    form = TokenForm(request.POST, prefix="token")
    if not form.is_valid():
        return _page(request, status=400, form=form)
    data = form.cleaned_data
    try:
        issued = tokens.create_token(
            user=request.user,
            name=data["name"],
            scopes=data["scopes"],
            expires_in_days=data["expires_in_days"],
            instrument=data["instrument"],
        )
    except DomainError as error:
        return _page(request, status=_refused(form, error), form=form)
    return _page(request, issued=issued)


@login_required
@require_POST
def create_instrument_token(request: HttpRequest) -> HttpResponse:
    if not is_staff(request.user):
        raise PermissionDenied("Only facility staff can issue an instrument-PC token.")
    form = InstrumentTokenForm(request.POST, prefix="pc")
    if not form.is_valid():
        return _page(request, status=400, instrument_form=form)
    data = form.cleaned_data
    try:
        issued = tokens.create_instrument_token(
            instrument=data["instrument"],
            name=data["name"],
            by=request.user,
            expires_in_days=data["expires_in_days"],
        )
    except DomainError as error:
        return _page(request, status=_refused(form, error), instrument_form=form)
    return _page(request, issued=issued)


@login_required
@require_POST
def revoke_token(request: HttpRequest, pk: int) -> HttpResponse:
    # Someone else's token is a 404 to a non-staff person, as on the API.
    token = get_object_or_404(tokens.tokens_visible_to(request.user), pk=pk)
    try:
        token = tokens.revoke_token(token=token, by=request.user)
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    whose = "" if token.user_id == request.user.pk else f" of {token.user.get_username()}"
    kind = "instrument-PC token" if token.kind == TokenKind.INSTRUMENT else "token"
    messages.success(request, f"The {kind} “{token.name}”{whose} is revoked; it stops working now.")
    return redirect("api-tokens")
