"""Shared fixtures: the named personas of the test suite and the service gates.

Personas: a facility manager; two researchers in different groups (A and B); the leader of group A;
an external (commercial) client. All invented.
"""

from __future__ import annotations

import os
import socket
from dataclasses import dataclass
from urllib.parse import urlparse

import pytest

from facility.people.models import RateCategory, Role

REQUIRE_SERVICES = os.environ.get("BEAMLEDGER_REQUIRE_SERVICES") == "1"


def _single_threaded_live_server() -> None:
    """Serve the live test server from one thread.

    With SQLite the test database is shared in memory and the live server reuses the test's own
    connection; Django's threaded server would then use that one connection from several threads
    at once (a browser loads a page's charts in parallel) and can hang. One thread answers the
    requests in turn, which is all a test needs.
    """
    from django.core.servers.basehttp import WSGIServer
    from django.test import testcases

    class OneThreadServer(WSGIServer):
        def __init__(self, *args, connections_override=None, **kwargs):
            super().__init__(*args, **kwargs)

    testcases.LiveServerThread.server_class = OneThreadServer


_single_threaded_live_server()


def _redis_reachable(url: str) -> bool:
    parsed = urlparse(url)
    try:
        with socket.create_connection((parsed.hostname or "127.0.0.1", parsed.port or 6379), 1):
            return True
    except OSError:
        return False


def pytest_runtest_setup(item: pytest.Item) -> None:
    """Skip tests whose service is absent — or fail them when CI says services are required."""
    from django.db import connection

    needs = []
    if item.get_closest_marker("postgres") and connection.vendor != "postgresql":
        needs.append("PostgreSQL (set DATABASE_URL=postgres://...)")
    if item.get_closest_marker("redis"):
        broker = os.environ.get("CELERY_BROKER_URL", "")
        if not broker or not _redis_reachable(broker):
            needs.append("Redis (set CELERY_BROKER_URL=redis://...)")
    if needs:
        reason = "needs " + " and ".join(needs)
        if REQUIRE_SERVICES:
            pytest.fail(f"BEAMLEDGER_REQUIRE_SERVICES=1 but this test {reason}")
        pytest.skip(reason)


@pytest.fixture(autouse=True)
def _eager_jobs(request: pytest.FixtureRequest, settings):
    """Run background jobs in-process, except in tests that exercise a real worker."""
    from facility.celery import app

    if request.node.get_closest_marker("redis"):
        yield
        return
    old = app.conf.task_always_eager
    app.conf.task_always_eager = True
    settings.CELERY_TASK_ALWAYS_EAGER = True
    yield
    app.conf.task_always_eager = old


@pytest.fixture(autouse=True)
def _media_in_tmp(settings, tmp_path):
    settings.MEDIA_ROOT = tmp_path / "media"


@pytest.fixture(autouse=True)
def _fresh_finder_digest():
    # The finder keeps a per-process copy of logbook rows; each test's rows are rolled back.
    from facility.finder import digest

    digest.current().clear()
    yield
    digest.current().clear()


@pytest.fixture(autouse=True)
def _fast_passwords(settings):
    # The real hasher is slow by design; tests need no protection against brute force.
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]


@dataclass
class Facility:
    """The invented facility every test can start from."""

    manager: object
    researcher_a: object
    researcher_b: object
    leader_a: object
    client: object
    group_a: object
    group_b: object
    client_group: object
    account_a: object
    account_b: object
    client_account: object
    sem: object


@pytest.fixture
def facility(db) -> Facility:
    from tests import factories as f

    group_a = f.GroupFactory(name="Kestrel surface lab")
    group_b = f.GroupFactory(name="Larchmoor polymer group")
    client_group = f.GroupFactory(
        name="Quillfen Coatings (client)", shares_details=False, counts_in_summaries=True
    )
    manager = f.UserFactory(username="mara.manager", is_staff=True, profile__role=Role.MANAGER)
    researcher_a = f.UserFactory(username="ada.researcher")
    researcher_b = f.UserFactory(username="ben.researcher")
    leader_a = f.UserFactory(username="lena.leader")
    client = f.UserFactory(username="cyd.client", profile__rate_category=RateCategory.COMMERCIAL)
    for user, group in [
        (researcher_a, group_a),
        (leader_a, group_a),
        (researcher_b, group_b),
        (client, client_group),
    ]:
        f.MembershipFactory(user=user, group=group)
    group_a.leader = leader_a
    group_a.save()
    sem = f.InstrumentFactory(code="fe-sem", name="Field-emission SEM")
    for user in (researcher_a, researcher_b, leader_a, client):
        f.TrainingRecordFactory(user=user, instrument=sem)
    return Facility(
        manager=manager,
        researcher_a=researcher_a,
        researcher_b=researcher_b,
        leader_a=leader_a,
        client=client,
        group_a=group_a,
        group_b=group_b,
        client_group=client_group,
        account_a=f.AccountFactory(code="KES-01", group=group_a),
        account_b=f.AccountFactory(code="LAR-01", group=group_b),
        client_account=f.AccountFactory(code="PO-QF-7", group=client_group, kind="purchase_order"),
        sem=sem,
    )
