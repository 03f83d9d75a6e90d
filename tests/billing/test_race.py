"""Concurrent runs on PostgreSQL, with real separate connections (one per thread).

Drafting the same month from several workers at once bills every session once; finalising
several statements at once numbers them 1…n without a gap or a repeat.
"""

from __future__ import annotations

import threading
from decimal import Decimal

import pytest
from django.db import connection, connections

from facility.billing import services
from facility.billing.models import Charge, Statement
from facility.logbook.models import InstrumentSession
from tests import factories as f
from tests.billing.helpers import MARCH, add_tariff, at, log_session

THREADS = 6


def _in_threads(work, count):
    barrier = threading.Barrier(count, timeout=30)
    outcomes: list[str] = []
    lock = threading.Lock()

    def run(k):
        try:
            barrier.wait()
            result = work(k)
        except Exception as exc:  # any error is a failure of the rule under test
            result = f"error: {exc!r}"
        finally:
            connections.close_all()
        with lock:
            outcomes.append(result)

    threads = [threading.Thread(target=run, args=(k,)) for k in range(count)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    return outcomes


def _month_of_use(facility):
    add_tariff(facility)
    accounts = [f.AccountFactory(code=f"RACE-{n}", group=facility.group_a) for n in range(THREADS)]
    for n, account in enumerate(accounts):
        for day in (2, 3, 4):
            log_session(facility, at(day, 9 + n), at(day, 10 + n), account=account)
    return accounts


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_concurrent_month_drafts_bill_each_session_once(facility):
    assert connection.vendor == "postgresql"
    _month_of_use(facility)
    outcomes = _in_threads(lambda k: services.draft_month(month=MARCH).failed or "ok", THREADS)
    assert outcomes == ["ok"] * THREADS, outcomes
    sessions = set(InstrumentSession.objects.values_list("id", flat=True))
    billed = list(Charge.objects.values_list("session_id", flat=True))
    assert sorted(billed) == sorted(sessions)  # each exactly once
    assert Statement.objects.count() == THREADS
    # 3 sessions of 1 h at 80.00 per account.
    assert set(Statement.objects.values_list("total", flat=True)) == {Decimal("240.00")}


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_concurrent_finalising_numbers_without_gaps(facility, clock):
    _month_of_use(facility)
    services.draft_month(month=MARCH)
    ids = list(Statement.objects.order_by("id").values_list("id", flat=True))

    def finalise(k):
        statement = Statement.objects.get(pk=ids[k])
        return services.finalise_statement(statement=statement, by=facility.manager).number

    numbers = _in_threads(finalise, THREADS)
    assert sorted(numbers) == list(range(1, THREADS + 1)), numbers
