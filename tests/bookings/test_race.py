"""Sixteen people press "book" for the same slot at once: exactly one wins, fifteen are refused.

On PostgreSQL the exclusion constraint decides; the threads use real, separate connections.
"""

from __future__ import annotations

import datetime as dt
import threading

import pytest
from django.db import connection, connections
from django.utils import timezone

from facility.bookings import services
from facility.bookings.models import Booking
from facility.errors import Conflict
from tests import factories as f

THREADS = 16


def _setup():
    group = f.GroupFactory(name="Racing group")
    instrument = f.InstrumentFactory(code="race-sem", allows_out_of_hours=True)
    account = f.AccountFactory(code="RACE-1", group=group)
    users = []
    for n in range(THREADS):
        user = f.UserFactory(username=f"racer{n}")
        f.MembershipFactory(user=user, group=group)
        f.TrainingRecordFactory(user=user, instrument=instrument, level=3)
        users.append(user)
    return instrument, account, users


def _race(instrument, account, users, starts, ends):
    barrier = threading.Barrier(len(users), timeout=30)
    outcomes: list[str] = []
    lock = threading.Lock()

    def attempt(user):
        try:
            barrier.wait()
            services.book(
                user=user, instrument=instrument, account=account, starts_at=starts, ends_at=ends
            )
            result = "booked"
        except Conflict:
            result = "conflict"
        except Exception as exc:  # anything else is a failure of the rule
            result = f"error: {exc!r}"
        finally:
            connections.close_all()
        with lock:
            outcomes.append(result)

    threads = [threading.Thread(target=attempt, args=(u,)) for u in users]
    for t in threads:
        t.start()
    for t in threads:
        t.join(60)
    return outcomes


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_sixteen_threads_one_booking_on_postgres():
    assert connection.vendor == "postgresql"
    instrument, account, users = _setup()
    starts = timezone.now() + dt.timedelta(days=3)
    outcomes = _race(instrument, account, users, starts, starts + dt.timedelta(hours=1))
    assert outcomes.count("booked") == 1, outcomes
    assert outcomes.count("conflict") == THREADS - 1, outcomes
    assert Booking.objects.filter(instrument=instrument).count() == 1


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_exclusion_constraint_refuses_a_raw_overlap():
    """The database holds the rule even when the service is bypassed."""
    from django.db import IntegrityError

    instrument, account, users = _setup()
    starts = timezone.now() + dt.timedelta(days=3)
    Booking.objects.create(
        instrument=instrument,
        user=users[0],
        account=account,
        starts_at=starts,
        ends_at=starts + dt.timedelta(hours=2),
    )
    with pytest.raises(IntegrityError, match="booking_no_overlap"):
        Booking.objects.create(
            instrument=instrument,
            user=users[1],
            account=account,
            starts_at=starts + dt.timedelta(hours=1),
            ends_at=starts + dt.timedelta(hours=3),
        )


@pytest.mark.django_db(transaction=True)
def test_threads_on_any_database_end_with_one_booking():
    """On SQLite the IMMEDIATE transaction serialises the check and the insert."""
    instrument, account, users = _setup()
    starts = timezone.now() + dt.timedelta(days=3)
    outcomes = _race(instrument, account, users[:6], starts, starts + dt.timedelta(hours=1))
    assert outcomes.count("booked") == 1, outcomes
    assert Booking.objects.filter(instrument=instrument).count() == 1
