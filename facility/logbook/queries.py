"""Reads on the logbook: access scoping and the lookups the pages and API share."""

from __future__ import annotations

from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Q, QuerySet

from facility.logbook.models import Flag, InstrumentSession, Micrograph, Specimen
from facility.people.queries import group_ids_of, is_staff


def visible_to(user: AbstractBaseUser) -> QuerySet[InstrumentSession]:
    """Sessions a person may see: staff all; others their own and their groups' (by account)."""
    qs = InstrumentSession.objects.select_related(
        "instrument", "operator", "account", "account__group", "specimen", "coating"
    )
    if is_staff(user):
        return qs
    if not user.is_authenticated:
        return qs.none()
    return qs.filter(Q(operator=user) | Q(account__group_id__in=group_ids_of(user)))


def micrographs_visible_to(user: AbstractBaseUser) -> QuerySet[Micrograph]:
    return Micrograph.objects.filter(session__in=visible_to(user).values("id")).select_related(
        "session", "session__instrument"
    )


def flags_visible_to(user: AbstractBaseUser) -> QuerySet[Flag]:
    return Flag.objects.filter(session__in=visible_to(user).values("id")).select_related(
        "session", "micrograph"
    )


def specimens_visible_to(user: AbstractBaseUser) -> QuerySet[Specimen]:
    if is_staff(user):
        return Specimen.objects.all()
    if not user.is_authenticated:
        return Specimen.objects.none()
    return Specimen.objects.filter(Q(owner=user) | Q(group_id__in=group_ids_of(user)))


def open_session(instrument_id: int) -> InstrumentSession | None:
    return (
        InstrumentSession.objects.filter(instrument_id=instrument_id, ended_at__isnull=True)
        .select_related("operator")
        .first()
    )


def last_conditions_for(user: AbstractBaseUser, instrument_id: int):
    """The most recent conditions this person logged on this instrument (to pre-fill a form)."""
    from facility.logbook.models import Conditions

    return (
        Conditions.objects.filter(session__operator=user, session__instrument_id=instrument_id)
        .order_by("-session__started_at", "-id")
        .first()
    )
