"""Query counts of every list endpoint, pinned: the same for 2 rows as for 10.

A list that grows a query per row (an N+1) fails here. The pinned number is what one page costs
for a signed-in researcher: the session and user lookups, the caller's groups, and the page.
"""

from __future__ import annotations

import datetime as dt
import itertools
from decimal import Decimal

import pytest
from django.utils import timezone
from rest_framework.test import APIClient

from api import tokens
from facility.billing.models import Charge, Statement
from facility.logbook.models import Flag, Micrograph
from facility.upkeep.models import Alert
from tests import factories as f
from tests.api.endpoints import list_operations

_counter = itertools.count(1)


def _session(fa):
    n = next(_counter)
    specimen = f.SpecimenFactory(owner=fa.researcher_a, group=fa.group_a)
    start = timezone.now() - dt.timedelta(days=n, hours=3)
    return f.InstrumentSessionFactory(
        instrument=fa.sem,
        operator=fa.researcher_a,
        account=fa.account_a,
        started_at=start,
        specimen=specimen,
        coating=f.CoatingFactory(specimen=specimen),
    )


def _micrograph(fa):
    n = next(_counter)
    return Micrograph.objects.create(
        session=_session(fa), sha256=f"{n:064x}", uploaded_by=fa.researcher_a, file="x.tif"
    )


def _flag(fa):
    return Flag.objects.create(
        session=_session(fa),
        code="charging_risk",
        message="Likely to charge.",
        dismissed_at=timezone.now(),
        dismissed_by=fa.researcher_a,
        dismiss_reason="coated",
    )


def _booking(fa):
    n = next(_counter)
    start = timezone.now() + dt.timedelta(days=n)
    return f.BookingFactory(
        instrument=fa.sem, user=fa.researcher_a, account=fa.account_a, starts_at=start
    )


def _alert(fa):
    n = next(_counter)
    return Alert.objects.create(
        topic=f"count:{n}",
        counter_key="fe-sem:emitter_hours",
        instrument=fa.sem,
        counter="emitter_hours",
        level="warn",
        value=7000,
        rated=8000,
        message="emitter past its warn level",
        raised_at=timezone.now() - dt.timedelta(hours=n),
    )


def _statement(fa):
    n = next(_counter)
    return Statement.objects.create(
        account=f.AccountFactory(group=fa.group_a), month=dt.date(2000 + n % 50, 1 + n % 12, 1)
    )


def _line(fa):
    # An adjustment naming researcher A as its user: one of "my costs".
    return Charge.objects.create(
        statement=_statement(fa),
        position=1,
        kind="adjustment",
        currency="EUR",
        amount=Decimal("-1.00"),
        description="Adjustment: goodwill",
        reason="goodwill",
        created_by=fa.manager,
        user=fa.researcher_a,
    )


SEEDERS = {
    "/api/v1/accounts/": lambda fa: f.AccountFactory(group=fa.group_a),
    "/api/v1/billing/lines/": _line,
    "/api/v1/billing/statements/": _statement,
    "/api/v1/bookings/": _booking,
    "/api/v1/flags/": _flag,
    "/api/v1/instruments/": lambda fa: f.InstrumentFactory(),
    "/api/v1/micrographs/": _micrograph,
    "/api/v1/sessions/": _session,
    "/api/v1/specimens/": lambda fa: f.SpecimenFactory(owner=fa.researcher_a, group=fa.group_a),
    "/api/v1/tokens/": lambda fa: tokens.create_token(user=fa.researcher_a, name="script"),
    "/api/v1/upkeep/alerts/": _alert,
}
# Who asks, where not researcher A: staff-only lists are read by the facility manager.
CALLERS = {"/api/v1/upkeep/alerts/": "manager", "/api/v1/billing/statements/": "leader_a"}

# Session + user (auth), the caller's group ids (visible_to), the page itself. Accounts, the
# instrument catalogue and tokens need no separate group lookup (a subquery, or none).
PINNED = {
    "/api/v1/accounts/": 3,
    # Billing also reads the caller's profile (finance sees all) and the groups they lead.
    "/api/v1/billing/lines/": 5,
    "/api/v1/billing/statements/": 5,
    "/api/v1/bookings/": 4,
    "/api/v1/flags/": 4,
    "/api/v1/instruments/": 3,
    "/api/v1/micrographs/": 4,
    "/api/v1/sessions/": 4,
    "/api/v1/specimens/": 4,
    "/api/v1/tokens/": 3,
    # Session + user and the page: staff need no group lookup; instrument and pump are joined.
    "/api/v1/upkeep/alerts/": 3,
}


def test_every_list_endpoint_is_pinned():
    assert sorted(PINNED) == list_operations()
    assert sorted(SEEDERS) == list_operations()


@pytest.mark.parametrize("path", sorted(PINNED))
def test_list_queries_do_not_grow_with_rows(facility, django_assert_num_queries, path):
    api = APIClient()
    api.force_login(getattr(facility, CALLERS.get(path, "researcher_a")))
    base = len(api.get(path).json()["results"])
    for _ in range(2):
        SEEDERS[path](facility)
    with django_assert_num_queries(PINNED[path]):
        page = api.get(path)
    assert len(page.json()["results"]) == base + 2
    for _ in range(8):
        SEEDERS[path](facility)
    with django_assert_num_queries(PINNED[path]):
        page = api.get(path)
    assert len(page.json()["results"]) == base + 10
