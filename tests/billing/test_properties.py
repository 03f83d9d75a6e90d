"""Hypothesis property tests of drafting against the database.

For random months of sessions and bookings: a statement's total is the sum of its lines; every
amount has two places; drafting again gives identical lines; and however sessions are moved
between accounts and drafts rerun in any order, no session sits on two statement lines.
Each example runs in a savepoint that is rolled back, so examples do not see each other.
"""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
from django.db import transaction
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from facility.billing import services
from facility.billing.models import Charge, Statement
from facility.bookings.models import BookingState, Purpose
from facility.logbook.models import InstrumentSession
from tests.billing.helpers import MARCH, TZ, add_tariff, log_booking, log_session

pytestmark = pytest.mark.django_db

PROPERTY_SETTINGS = settings(
    max_examples=15,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)

sessions = st.lists(
    st.tuples(
        st.integers(0, 2),  # account
        st.integers(1, 31),  # day of March
        st.integers(0, 24 * 60 - 1),  # start minute of the day
        st.integers(1, 10 * 60),  # length in minutes
        st.sampled_from([Purpose.OWN_USE, Purpose.ASSISTED, Purpose.SERVICE]),
        st.integers(0, 120),  # staff minutes
    ),
    min_size=1,
    max_size=12,
)
bookings = st.lists(
    st.tuples(
        st.integers(0, 2),
        st.integers(1, 31),
        st.integers(0, 23),
        st.integers(1, 6),
        st.sampled_from([BookingState.NO_SHOW, BookingState.LATE_CANCELLED]),
    ),
    max_size=4,
)


class _Rollback(Exception):
    pass


def _run_isolated(check):
    try:
        with transaction.atomic():
            check()
            raise _Rollback
    except _Rollback:
        pass


def _tariffs(fac):
    add_tariff(fac, out_of_hours_factor="1.5", minimum_charge="12.00", no_show_share="1")
    add_tariff(
        fac,
        purpose=Purpose.ASSISTED,
        staff_hourly_rate="55.55",
        increment_minutes=10,
        late_cancellation_share="0.333",
    )


def _log(fac, session_specs, booking_specs):
    accounts = [fac.account_a, fac.account_b, fac.client_account]
    # All internal users: the tariffs below are internal, so every non-service entry is priced.
    users = [fac.researcher_a, fac.researcher_b, fac.leader_a]
    for account, day, minute, length, purpose, staff in session_specs:
        start = dt.datetime(2027, 3, day, tzinfo=TZ) + dt.timedelta(minutes=minute)
        log_session(
            fac,
            start,
            start + dt.timedelta(minutes=length),
            user=users[account],
            account=accounts[account],
            purpose=purpose,
            staff_minutes=staff,
        )
    for account, day, hour, length, state in booking_specs:
        start = dt.datetime(2027, 3, day, hour, tzinfo=TZ)
        log_booking(
            fac,
            start,
            start + dt.timedelta(hours=length),
            state=state,
            user=users[account],
            account=accounts[account],
        )
    return accounts


def _lines(statement):
    skip = {"id", "created_at"}
    return [
        {k: v for k, v in row.items() if k not in skip}
        for row in Charge.objects.filter(statement=statement).order_by("position").values()
    ]


@PROPERTY_SETTINGS
@given(session_specs=sessions, booking_specs=bookings)
def test_totals_places_and_idempotence(facility, session_specs, booking_specs):
    def check():
        _tariffs(facility)
        _log(facility, session_specs, booking_specs)
        services.draft_month(month=MARCH)
        first = {s.pk: _lines(s) for s in Statement.objects.all()}
        for statement in Statement.objects.all():
            amounts = list(statement.lines.values_list("amount", flat=True))
            assert statement.total == sum(amounts, Decimal("0.00"))
            assert all(a.as_tuple().exponent == -2 for a in amounts)
            assert statement.total.as_tuple().exponent == -2
        services.draft_month(month=MARCH)
        again = {s.pk: _lines(s) for s in Statement.objects.all()}
        assert again == first

    _run_isolated(check)


@PROPERTY_SETTINGS
@given(
    session_specs=sessions,
    moves=st.lists(st.tuples(st.integers(0, 11), st.integers(0, 2)), max_size=6),
    order=st.permutations([0, 1, 2]),
)
def test_no_session_on_two_statements(facility, session_specs, moves, order):
    def check():
        _tariffs(facility)
        accounts = _log(facility, session_specs, [])
        services.draft_month(month=MARCH)
        logged = list(InstrumentSession.objects.order_by("id"))
        for index, target in moves:
            session = logged[index % len(logged)]
            session.account = accounts[target]
            session.save(update_fields=["account"])
        for k in order:  # redraft accounts one by one, in any order
            services.draft_statement(account=accounts[k], month=MARCH, by=facility.manager)
        on_lines = list(Charge.objects.exclude(session=None).values_list("session_id", flat=True))
        assert len(on_lines) == len(set(on_lines))
        billable = InstrumentSession.objects.exclude(purpose=Purpose.SERVICE)
        assert set(on_lines) == set(billable.values_list("id", flat=True))
        for line in Charge.objects.exclude(session=None).select_related("session", "statement"):
            assert line.statement.account_id == line.session.account_id
        for statement in Statement.objects.all():
            assert statement.total == sum(
                statement.lines.values_list("amount", flat=True), Decimal("0.00")
            )

    _run_isolated(check)
