"""Who uses the facility and who pays: research groups, memberships, accounts, profiles."""

from __future__ import annotations

import datetime as dt

from django.conf import settings
from django.db import models
from django.db.models import F, Q


class RateCategory(models.TextChoices):
    INTERNAL = "internal", "Internal"
    EXTERNAL_ACADEMIC = "external_academic", "External academic"
    COMMERCIAL = "commercial", "Commercial"


class Role(models.TextChoices):
    RESEARCHER = "researcher", "Researcher"
    MANAGER = "manager", "Facility manager"
    FINANCE = "finance", "Finance"


class Group(models.Model):
    """A research group (or an outside client's organisation) that books time."""

    name = models.CharField(max_length=120, unique=True)
    leader = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.SET_NULL,
        related_name="led_groups",
    )
    # Whether other groups may see this group's session details and images in the finder.
    # Commercial clients default to off (see finder issue); anonymised conditions still count.
    shares_details = models.BooleanField(
        default=True, help_text="Other groups may see this group's session details and images."
    )
    counts_in_summaries = models.BooleanField(
        default=True,
        help_text="This group's sessions count, anonymised, in facility-wide condition summaries.",
    )

    class Meta:
        ordering = ["name"]

    def __str__(self) -> str:
        return self.name


class Membership(models.Model):
    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="memberships"
    )
    group = models.ForeignKey(Group, on_delete=models.CASCADE, related_name="memberships")
    joined_on = models.DateField(default=dt.date.today)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["user", "group"], name="membership_unique_user_group")
        ]

    def __str__(self) -> str:
        return f"{self.user} in {self.group}"


class AccountKind(models.TextChoices):
    COST_CENTRE = "cost_centre", "Cost centre"
    GRANT = "grant", "Grant"
    PURCHASE_ORDER = "purchase_order", "Purchase order"


class Account(models.Model):
    """Where the money comes from: a cost centre, grant or purchase order, valid between two dates."""

    code = models.CharField(max_length=40, unique=True)
    name = models.CharField(max_length=160)
    kind = models.CharField(max_length=20, choices=AccountKind.choices)
    group = models.ForeignKey(Group, on_delete=models.PROTECT, related_name="accounts")
    valid_from = models.DateField()
    valid_to = models.DateField(null=True, blank=True, help_text="Empty means open-ended.")
    is_active = models.BooleanField(default=True)

    class Meta:
        ordering = ["code"]
        constraints = [
            models.CheckConstraint(
                condition=Q(valid_to__isnull=True) | Q(valid_to__gte=F("valid_from")),
                name="account_valid_to_after_from",
            )
        ]

    def __str__(self) -> str:
        return f"{self.code} — {self.name}"

    def covers(self, first: dt.date, last: dt.date) -> bool:
        """True when the account is active and valid on every day from `first` to `last`."""
        if not self.is_active or first < self.valid_from:
            return False
        return self.valid_to is None or last <= self.valid_to


class Profile(models.Model):
    user = models.OneToOneField(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="profile"
    )
    rate_category = models.CharField(
        max_length=20, choices=RateCategory.choices, default=RateCategory.INTERNAL
    )
    role = models.CharField(max_length=20, choices=Role.choices, default=Role.RESEARCHER)
    phone = models.CharField(max_length=40, blank=True)

    def __str__(self) -> str:
        return f"{self.user} ({self.get_role_display()})"


class Notification(models.Model):
    """An in-app message to one person (flags on their session, upkeep alerts, statements)."""

    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="notifications"
    )
    subject = models.CharField(max_length=200)
    body = models.TextField(blank=True)
    link = models.CharField(max_length=300, blank=True)
    # Identifies what the message is about so the same event never notifies twice.
    topic = models.CharField(max_length=200, blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    read_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at"]
        indexes = [models.Index(fields=["user", "read_at"])]
        constraints = [
            models.UniqueConstraint(
                fields=["user", "topic"],
                condition=~Q(topic=""),
                name="notification_unique_user_topic",
            )
        ]

    def __str__(self) -> str:
        return self.subject
