"""Remove the demo facility: everything on its instruments, by its people, or on its groups' accounts.

Rows are deleted in an order the PROTECT foreign keys allow (sessions and bookings before the
accounts, specimens, instruments and people they point at). Rows of other apps that protect a demo
row (a charge on a demo session, a service event on a demo instrument) are deleted first, since
`--reset` means the demo goes entirely. Change-history rows of the demo go too, so a reload starts
clean.
"""

from __future__ import annotations

from collections import defaultdict

from django.contrib.auth import get_user_model
from django.db import transaction
from django.db.models import Q, QuerySet
from django.db.models.deletion import ProtectedError, RestrictedError

from facility.bookings.models import Booking
from facility.demo import catalogue as cat
from facility.instruments.models import Instrument
from facility.logbook.models import Conditions, Flag, InstrumentSession, Specimen
from facility.people.models import Account, Group

MAX_DEPTH = 8


def _delete(queryset: QuerySet, depth: int = 0) -> int:
    """Delete the rows, first deleting whatever protects them (a chain at most MAX_DEPTH long).

    Returns how many rows went, the protecting ones included.
    """
    total = 0
    while True:
        try:
            with transaction.atomic():
                return total + queryset.delete()[0]
        except (ProtectedError, RestrictedError) as exc:
            if depth >= MAX_DEPTH:
                raise
            blockers = (
                exc.protected_objects if isinstance(exc, ProtectedError) else exc.restricted_objects
            )
            by_model = defaultdict(set)
            for obj in blockers:
                by_model[type(obj)].add(obj.pk)
            removed = sum(
                _delete(model._base_manager.filter(pk__in=pks), depth + 1)
                for model, pks in by_model.items()
            )
            if not removed:
                raise
            total += removed


def delete_demo() -> int:
    """Delete the demo data; returns how many rows went (history rows included)."""
    User = get_user_model()
    users = User.objects.filter(username__in=[u.username for u in cat.USERS])
    instruments = Instrument.objects.filter(code__in=[i.code for i in cat.INSTRUMENTS])
    groups = Group.objects.filter(name__in=[g.name for g in cat.GROUPS])
    deleted = 0
    with transaction.atomic():
        mine = Q(instrument__in=instruments) | Q(account__group__in=groups)
        session_ids = list(
            InstrumentSession.objects.filter(mine | Q(operator__in=users)).values_list(
                "id", flat=True
            )
        )
        booking_ids = list(
            Booking.objects.filter(mine | Q(user__in=users)).values_list("id", flat=True)
        )
        for queryset in (
            InstrumentSession.objects.filter(id__in=session_ids),
            Booking.objects.filter(id__in=booking_ids),
            Specimen.objects.filter(Q(group__in=groups) | Q(owner__in=users)),
            Account.objects.filter(group__in=groups),
            instruments,
            groups,
            users,
        ):
            deleted += _delete(queryset)
        # Conditions and flags by session: this also catches rows deleted while the demo was
        # built (a flag whose cause went away) that left history behind.
        for history in (
            InstrumentSession.history.filter(id__in=session_ids),
            Booking.history.filter(id__in=booking_ids),
            Conditions.history.filter(session_id__in=session_ids),
            Flag.history.filter(session_id__in=session_ids),
        ):
            deleted += history.delete()[0]
    return deleted
