"""Writes on people: notifications (in-app list and e-mail)."""

from __future__ import annotations

import logging

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.models import AbstractBaseUser
from django.core.mail import send_mail
from django.db import IntegrityError, transaction
from django.utils import timezone

from facility.people.models import Notification

log = logging.getLogger(__name__)


def notify(
    *,
    user: AbstractBaseUser,
    subject: str,
    body: str = "",
    link: str = "",
    topic: str = "",
    email: bool = True,
) -> Notification | None:
    """Tell one person something, in the app and by e-mail.

    A non-empty `topic` names the event: the same person is told about the same topic only once,
    so a job that runs twice does not send two messages. Returns None when already told.
    """
    if topic and Notification.objects.filter(user=user, topic=topic).exists():
        return None
    try:
        with transaction.atomic():
            note = Notification.objects.create(
                user=user, subject=subject[:200], body=body, link=link, topic=topic
            )
    except IntegrityError:
        return None  # a concurrent run told them first
    if email and user.email:
        # The in-app message is the record; a mail server that is down must not undo it.
        try:
            send_mail(
                f"[{settings.FACILITY_NAME}] {subject}",
                f"{body}\n\n{link}".strip(),
                settings.DEFAULT_FROM_EMAIL,
                [user.email],
            )
        except Exception:  # any transport error
            log.exception("could not e-mail notification %s to %s", note.pk, user.pk)
    return note


def mark_read(*, user: AbstractBaseUser, ids: list[int] | None = None) -> int:
    """Mark a person's notifications read (all unread ones when `ids` is None); returns how many."""
    qs = Notification.objects.filter(user=user, read_at__isnull=True)
    if ids is not None:
        qs = qs.filter(id__in=ids)
    return qs.update(read_at=timezone.now())


def notify_staff(*, subject: str, body: str = "", link: str = "", topic: str = "") -> int:
    """Tell every active staff member; returns how many were newly told."""
    told = 0
    for user in get_user_model().objects.filter(is_staff=True, is_active=True):
        if notify(user=user, subject=subject, body=body, link=link, topic=topic):
            told += 1
    return told
