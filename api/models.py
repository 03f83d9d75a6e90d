"""API tokens: how scripts and acquisition PCs prove who they are.

Only a SHA-256 digest of each secret is stored; the secret itself is shown once, when it is made.
A token expires, can be revoked, carries scopes and may be bound to one instrument.
"""

from __future__ import annotations

from django.conf import settings
from django.db import models
from django.db.models import Q
from django.utils import timezone

from facility.instruments.models import Instrument


class Scope(models.TextChoices):
    READ = "read", "Read everything the owner may see"
    WRITE = "write", "Book, check in and out, log sessions, dismiss flags"
    UPLOAD = "upload", "Upload micrographs"


class TokenKind(models.TextChoices):
    PERSONAL = "personal", "Personal token"
    # Issued by staff for the acquisition PC of one instrument; upload only.
    INSTRUMENT = "instrument", "Instrument-PC service token"


class ApiToken(models.Model):
    user = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        on_delete=models.CASCADE,
        related_name="api_tokens",
        help_text="Whose rights the token carries; for an instrument-PC token, the staff member "
        "who issued it.",
    )
    kind = models.CharField(max_length=12, choices=TokenKind.choices, default=TokenKind.PERSONAL)
    name = models.CharField(max_length=80, help_text="What the token is for, e.g. 'usage sheet'.")
    # The first characters of the secret, kept in clear so a person can tell tokens apart.
    prefix = models.CharField(max_length=12)
    digest = models.CharField(max_length=64, unique=True)
    scopes = models.JSONField(default=list)
    instrument = models.ForeignKey(
        Instrument,
        null=True,
        blank=True,
        on_delete=models.CASCADE,
        related_name="api_tokens",
        help_text="When set, the token reaches only this instrument's sessions and images.",
    )
    created_at = models.DateTimeField(default=timezone.now)
    expires_at = models.DateTimeField()
    revoked_at = models.DateTimeField(null=True, blank=True)
    revoked_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    last_used_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at", "-id"]
        indexes = [models.Index(fields=["user", "revoked_at"])]
        constraints = [
            models.CheckConstraint(
                condition=Q(expires_at__gt=models.F("created_at")),
                name="apitoken_expires_after_creation",
            ),
            models.CheckConstraint(
                condition=~Q(kind="instrument") | Q(instrument__isnull=False),
                name="apitoken_instrument_kind_has_instrument",
            ),
            models.CheckConstraint(
                condition=Q(kind__in=["personal", "instrument"]), name="apitoken_kind_known"
            ),
        ]

    def __str__(self) -> str:
        return f"{self.name} ({self.prefix}…)"

    def is_live(self, now=None) -> bool:
        now = now or timezone.now()
        return self.revoked_at is None and now < self.expires_at

    def allows(self, scope: str) -> bool:
        return scope in (self.scopes or [])
