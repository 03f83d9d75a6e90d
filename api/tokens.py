"""Issuing, revoking and checking API tokens.

The HTML token page and the API both call these functions; nothing else writes ApiToken rows.
A token is `bl_` followed by 32 random bytes in URL-safe base64. Because the secret is random
and long, one SHA-256 digest is enough to store it safely (the practice for high-entropy API keys;
a slow password hash defends short human-chosen secrets, which these are not).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import secrets
from dataclasses import dataclass

from django.contrib.auth import get_user_model
from django.contrib.auth.models import AbstractBaseUser
from django.db import transaction
from django.db.models import QuerySet
from django.utils import timezone

from api.models import ApiToken, Scope, TokenKind
from facility.errors import Conflict, DomainError, Invalid, NotAllowed
from facility.instruments.models import Instrument
from facility.people.queries import is_staff

TOKEN_PREFIX = "bl_"
DEFAULT_LIFETIME_DAYS = 90
MAX_LIFETIME_DAYS = 366
# Enough for every script and PC a person runs; more usually means tokens are not being revoked.
MAX_LIVE_TOKENS = 25
# Writing last_used_at on every request would turn each read into a write; a minute is precise
# enough to tell a person which token is still in use.
LAST_USED_PRECISION = dt.timedelta(minutes=1)


class TokenRejected(DomainError):
    """The token is unknown, expired or revoked (HTTP 401)."""

    code = "unauthenticated"
    http_status = 401


@dataclass(frozen=True)
class IssuedToken:
    """A new token and its secret. The secret is not stored: show it once, then forget it."""

    token: ApiToken
    secret: str


def digest_of(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def _clean_scopes(scopes: list[str] | tuple[str, ...]) -> list[str]:
    unknown = sorted(set(scopes) - set(Scope.values))
    if unknown:
        raise Invalid(
            f"Unknown scope {', '.join(unknown)}; use {', '.join(Scope.values)}.",
            fields={"scopes": [f"Unknown: {', '.join(unknown)}."]},
        )
    if not scopes:
        raise Invalid("Give the token at least one scope.", fields={"scopes": ["Required."]})
    # A fixed order makes two tokens with the same rights look the same.
    return [s for s in Scope.values if s in scopes]


def _clean_name(name: str) -> str:
    name = (name or "").strip()
    if not name:
        raise Invalid("Name the token after what uses it.", fields={"name": ["Required."]})
    if len(name) > 80:
        raise Invalid("Keep the token's name to 80 characters.", fields={"name": ["Too long."]})
    return name


def _expiry(now: dt.datetime, days: int) -> dt.datetime:
    if not isinstance(days, int) or isinstance(days, bool) or not 1 <= days <= MAX_LIFETIME_DAYS:
        raise Invalid(
            f"A token lasts from 1 to {MAX_LIFETIME_DAYS} days.",
            fields={"expires_in_days": [f"Between 1 and {MAX_LIFETIME_DAYS}."]},
        )
    return now + dt.timedelta(days=days)


def _issue(
    *,
    user: AbstractBaseUser,
    kind: str,
    name: str,
    scopes: list[str],
    instrument: Instrument | None,
    expires_at: dt.datetime,
    now: dt.datetime,
) -> IssuedToken:
    with transaction.atomic():
        # Lock the owner's row so two parallel requests cannot both pass the count check.
        get_user_model().objects.select_for_update().filter(pk=user.pk).first()
        live = ApiToken.objects.filter(user=user, revoked_at__isnull=True, expires_at__gt=now)
        if live.count() >= MAX_LIVE_TOKENS:
            raise Conflict(
                f"{user.get_username()} already has {MAX_LIVE_TOKENS} live tokens; "
                "revoke the ones no longer used first."
            )
        secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
        token = ApiToken.objects.create(
            user=user,
            kind=kind,
            name=name,
            prefix=secret[: len(TOKEN_PREFIX) + 8],
            digest=digest_of(secret),
            scopes=scopes,
            instrument=instrument,
            created_at=now,
            expires_at=expires_at,
        )
    return IssuedToken(token=token, secret=secret)


def create_token(
    *,
    user: AbstractBaseUser,
    name: str,
    scopes: list[str] | tuple[str, ...] = (Scope.READ,),
    expires_in_days: int = DEFAULT_LIFETIME_DAYS,
    instrument: Instrument | None = None,
    by: AbstractBaseUser | None = None,
    now: dt.datetime | None = None,
) -> IssuedToken:
    """Issue a personal token for `user`, carrying `scopes` and, optionally, bound to `instrument`.

    People make their own tokens; `by` (default: the user) must be the user. A token never grants
    more than its owner may do: scopes and the instrument binding only narrow.
    """
    by = by or user
    now = now or timezone.now()
    if by.pk != user.pk:
        raise NotAllowed("People create their own tokens; sign in as the token's owner.")
    if not user.is_active:
        raise NotAllowed("An inactive account cannot hold tokens.")
    return _issue(
        user=user,
        kind=TokenKind.PERSONAL,
        name=_clean_name(name),
        scopes=_clean_scopes(list(scopes)),
        instrument=instrument,
        expires_at=_expiry(now, expires_in_days),
        now=now,
    )


def create_instrument_token(
    *,
    instrument: Instrument,
    name: str,
    by: AbstractBaseUser,
    expires_in_days: int = MAX_LIFETIME_DAYS,
    now: dt.datetime | None = None,
) -> IssuedToken:
    """Staff issue an upload-only service token for the acquisition PC of one instrument.

    The token carries the issuer's name for the record and stops working if the issuer stops being
    staff; it can upload only to sessions on `instrument`.
    """
    now = now or timezone.now()
    if not is_staff(by):
        raise NotAllowed("Only facility staff can issue an instrument-PC token.")
    return _issue(
        user=by,
        kind=TokenKind.INSTRUMENT,
        name=_clean_name(name),
        scopes=[Scope.UPLOAD.value],
        instrument=instrument,
        expires_at=_expiry(now, expires_in_days),
        now=now,
    )


def revoke_token(
    *, token: ApiToken, by: AbstractBaseUser, now: dt.datetime | None = None
) -> ApiToken:
    """Revoke a token at once. Its owner or staff may; revoking twice changes nothing."""
    now = now or timezone.now()
    if token.user_id != by.pk and not is_staff(by):
        raise NotAllowed("Only the token's owner or facility staff can revoke it.")
    with transaction.atomic():
        token = ApiToken.objects.select_for_update().get(pk=token.pk)
        if token.revoked_at is None:
            token.revoked_at = now
            token.revoked_by = by
            token.save(update_fields=["revoked_at", "revoked_by"])
    return token


def authenticate(secret: str, *, now: dt.datetime | None = None) -> ApiToken:
    """The live token for `secret`, with its user loaded; records its use.

    Raises TokenRejected naming why (unknown, revoked, expired, owner inactive) — the reasons say
    nothing the holder of the secret does not already know.
    """
    now = now or timezone.now()
    if not secret.startswith(TOKEN_PREFIX) or len(secret) > 200:
        raise TokenRejected("This is not a Beamledger API token.")
    token = (
        ApiToken.objects.select_related("user", "instrument")
        .filter(digest=digest_of(secret))
        .first()
    )
    if token is None:
        raise TokenRejected("Unknown API token.")
    if token.revoked_at is not None:
        raise TokenRejected(
            f"This token was revoked on {timezone.localtime(token.revoked_at):%Y-%m-%d %H:%M}."
        )
    if now >= token.expires_at:
        raise TokenRejected(
            f"This token expired on {timezone.localtime(token.expires_at):%Y-%m-%d %H:%M}; "
            "make a new one."
        )
    if not token.user.is_active:
        raise TokenRejected("The account this token belongs to is no longer active.")
    if token.kind == TokenKind.INSTRUMENT and not is_staff(token.user):
        raise TokenRejected(
            "The staff member who issued this instrument token is no longer staff; ask staff "
            "for a new one."
        )
    if token.last_used_at is None or now - token.last_used_at >= LAST_USED_PRECISION:
        ApiToken.objects.filter(pk=token.pk).update(last_used_at=now)
        token.last_used_at = now
    return token


def tokens_visible_to(user: AbstractBaseUser) -> QuerySet[ApiToken]:
    """Tokens a person may list and revoke: their own; staff every token (to stop a leaked one)."""
    qs = ApiToken.objects.select_related("instrument", "user")
    if not user.is_authenticated:
        return qs.none()
    if is_staff(user):
        return qs
    return qs.filter(user=user)
