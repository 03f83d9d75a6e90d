"""API test fixtures: a frozen clock, a seeded world of two mirrored groups, and clients by role.

The world: group A (researcher A, leader A) and group B (researcher B) each have an open session
with a specimen, conditions, a stored micrograph with its assessment and thumbnail, a flag, a
requested booking and a token; the external client has a booking of their own. Instruments: the
facility's SEM (A's open session), a second SEM (B's open session) and a free one for check-ins.
"""

from __future__ import annotations

import datetime as dt
import functools
from dataclasses import dataclass, field

import pytest
import time_machine
from django.core.cache import cache
from django.core.files.base import ContentFile
from django.core.files.storage import default_storage
from rest_framework.test import APIClient

from api import tokens
from api.models import Scope
from facility.bookings.models import BookingState
from facility.logbook.models import AnalysisState, Assessment, Flag, Micrograph
from facility.logbook.uploads import storage_name
from tests import factories as f
from tests.logbook import images

# A Tuesday, 10:00 UTC: inside every instrument's normal hours, so walk-ups need no
# out-of-hours training (the default TIME_ZONE is UTC).
NOW = dt.datetime(2031, 3, 4, 10, 0, tzinfo=dt.UTC)

SESSION_ROLES = ("researcher_a", "researcher_b", "leader_a", "client", "staff")
TOKEN_ROLES = ("upload_token", "expired_token", "revoked_token")
ROLES = ("anonymous", *SESSION_ROLES, *TOKEN_ROLES)


@functools.cache
def small_tiff(seed: int) -> bytes:
    """A real 16-bit TIFF micrograph, small enough to keep uploads fast."""
    return images.tiff_bytes(images.clean(seed=seed, shape=(96, 96)))


@functools.cache
def small_png() -> bytes:
    return images.png_bytes(images.clean(seed=1, shape=(32, 32), bit_depth=8))


@pytest.fixture(autouse=True)
def _fresh_throttles():
    # Throttle counts live in the default cache, which outlives a test's database.
    cache.clear()
    yield
    cache.clear()


@pytest.fixture
def clock():
    with time_machine.travel(NOW, tick=False) as traveller:
        yield traveller


@dataclass
class Side:
    """One group's mirrored share of the world."""

    user: object
    group: object
    account: object
    instrument: object
    session: object
    specimen: object
    conditions: object
    micrograph: object
    flag: object
    booking: object
    token: object
    secret: str


@dataclass
class World:
    facility: object
    a: Side
    b: Side
    free: object
    client_booking: object
    secrets: dict[str, str] = field(default_factory=dict)

    def user(self, role: str):
        f = self.facility
        return {
            "researcher_a": f.researcher_a,
            "researcher_b": f.researcher_b,
            "leader_a": f.leader_a,
            "client": f.client,
            "staff": f.manager,
        }[role]

    def client_for(self, role: str) -> APIClient:
        api = APIClient()
        if role in SESSION_ROLES:
            api.force_login(self.user(role))
        elif role in TOKEN_ROLES:
            api.credentials(HTTP_AUTHORIZATION=f"Bearer {self.secrets[role]}")
        return api


def store_micrograph(session, by, data: bytes, name: str) -> Micrograph:
    """A micrograph as the pipeline leaves it: original, thumbnail and assessment stored."""
    import hashlib

    digest = hashlib.sha256(data).hexdigest()
    path = storage_name(digest, "tiff")
    if not default_storage.exists(path):
        default_storage.save(path, ContentFile(data))
    thumb = default_storage.save(f"thumbnails/{digest}.png", ContentFile(small_png()))
    micrograph = Micrograph.objects.create(
        session=session,
        file=path,
        thumbnail=thumb,
        sha256=digest,
        original_name=name,
        content_type="image/tiff",
        size_bytes=len(data),
        width=96,
        height=96,
        bit_depth=16,
        uploaded_by=by,
        state=AnalysisState.DONE,
    )
    Assessment.objects.create(
        micrograph=micrograph, analysis_version="test", resolution_px=2.0, charging_score=0.1
    )
    return micrograph


def _side(facility, user, group, account, instrument, seed: int) -> Side:
    specimen = f.SpecimenFactory(owner=user, group=group, name=f"{group.name} specimen")
    session = f.InstrumentSessionFactory(
        instrument=instrument,
        operator=user,
        account=account,
        started_at=NOW - dt.timedelta(hours=1),
        ended_at=None,
        beam_on_hours=None,
        specimen=specimen,
        notes=f"notes of {group.name}",
    )
    conditions = f.ConditionsFactory(session=session)
    micrograph = store_micrograph(session, user, small_tiff(seed), f"{group.name}.tif")
    flag = Flag.objects.create(
        session=session, code="charging_risk", severity="warning", message="Likely to charge."
    )
    booking = f.BookingFactory(
        instrument=instrument,
        user=user,
        account=account,
        starts_at=NOW + dt.timedelta(days=7),
        state=BookingState.REQUESTED,
    )
    issued = tokens.create_token(user=user, name=f"{user.username} sheet", scopes=["read"])
    return Side(
        user=user,
        group=group,
        account=account,
        instrument=instrument,
        session=session,
        specimen=specimen,
        conditions=conditions,
        micrograph=micrograph,
        flag=flag,
        booking=booking,
        token=issued.token,
        secret=issued.secret,
    )


@pytest.fixture
def world(facility, clock) -> World:
    fa = facility
    second = f.InstrumentFactory(code="vp-sem", name="Variable-pressure SEM")
    free = f.InstrumentFactory(code="tabletop", name="Tabletop SEM")
    for user in (fa.researcher_a, fa.researcher_b, fa.leader_a, fa.client):
        f.TrainingRecordFactory(user=user, instrument=second)
        f.TrainingRecordFactory(user=user, instrument=free)
    a = _side(fa, fa.researcher_a, fa.group_a, fa.account_a, fa.sem, seed=11)
    b = _side(fa, fa.researcher_b, fa.group_b, fa.account_b, second, seed=12)
    client_booking = f.BookingFactory(
        instrument=free,
        user=fa.client,
        account=fa.client_account,
        starts_at=NOW + dt.timedelta(days=9),
    )
    secrets = {
        "upload_token": tokens.create_token(
            user=fa.researcher_a, name="acquisition", scopes=[Scope.UPLOAD]
        ).secret,
        "expired_token": tokens.create_token(
            user=fa.researcher_a,
            name="old",
            scopes=["read", "write", "upload"],
            expires_in_days=1,
            now=NOW - dt.timedelta(days=2),
        ).secret,
    }
    revoked = tokens.create_token(
        user=fa.researcher_a, name="leaked", scopes=["read", "write", "upload"]
    )
    tokens.revoke_token(token=revoked.token, by=fa.researcher_a)
    secrets["revoked_token"] = revoked.secret
    return World(facility=fa, a=a, b=b, free=free, client_booking=client_booking, secrets=secrets)
