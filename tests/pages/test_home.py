"""The overview page differs by role; its query count is pinned."""

from __future__ import annotations

import datetime as dt

import pytest
from django.urls import reverse

from facility.bookings.models import BookingState
from facility.logbook.models import Flag, Severity
from facility.people.models import Notification
from tests import factories as f
from tests.pages.conftest import NOW, at, closed_session, open_session

pytestmark = pytest.mark.django_db


@pytest.fixture
def busy(facility, frozen):
    """Researcher A: a booking tomorrow, an open session, two sessions this month, one flag."""
    booking = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(7, 9),
        ends_at=at(7, 11),
    )
    closed_session(facility, at(3, 9), 2.0)
    closed_session(facility, at(4, 13), 1.5)
    closed_session(facility, dt.datetime(2030, 2, 27, 9, tzinfo=NOW.tzinfo), 4.0)  # February
    current = open_session(facility)
    flag = Flag.objects.create(
        session=current,
        code="charging",
        severity=Severity.PROBLEM,
        message="Charging in 1 of 1 images.",
    )
    Notification.objects.create(user=facility.researcher_a, subject="Charging on your session")
    return {"booking": booking, "session": current, "flag": flag}


def test_researcher_sees_their_week_at_a_glance(as_user, facility, busy):
    html = as_user(facility.researcher_a).get(reverse("home")).content.decode()
    assert reverse("booking-detail", args=[busy["booking"].pk]) in html
    assert "You are checked in on Field-emission SEM" in html
    assert "Charging" in html and "#flags" in html
    # 2 h + 1.5 h this month; the February session does not count (fixture arithmetic).
    assert "3 h 30 min" in html
    assert "2 sessions" in html
    assert "Charging on your session" in html
    assert "Requests waiting" not in html


def test_researcher_does_not_see_another_researchers_things(as_user, facility, busy):
    html = as_user(facility.researcher_b).get(reverse("home")).content.decode()
    assert "checked in" not in html
    assert reverse("booking-detail", args=[busy["booking"].pk]) not in html
    assert "Charging on your session" not in html
    assert "Nothing booked" in html


def test_staff_see_today_and_alerts(as_user, facility, busy):
    requested = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(6, 14),
        ends_at=at(6, 16),
        state=BookingState.REQUESTED,
    )
    busy["session"].fault_report = "Stage drifts in Y after venting."
    busy["session"].save()
    html = as_user(facility.manager).get(reverse("home")).content.decode()
    assert "Facility today" in html
    assert "in use" in html
    assert reverse("booking-detail", args=[requested.pk]) in html  # today, and pending
    assert reverse("booking-confirm", args=[requested.pk]) in html
    assert "Stage drifts in Y" in html
    assert "Open problem flags" in html and "Charging" in html
    assert "Month end" in html


def test_home_query_counts_are_pinned(as_user, facility, busy, django_assert_num_queries):
    researcher = as_user(facility.researcher_a)
    staff = as_user(facility.manager)
    # session + user, next bookings, open session, flags, month sums, notifications, unread count.
    with django_assert_num_queries(8):
        assert researcher.get(reverse("home")).status_code == 200
    # session + user, instruments, today's bookings, open sessions, pending, flags, faults,
    # notifications, open upkeep alerts, last month's statements, unread count.
    with django_assert_num_queries(12):
        assert staff.get(reverse("home")).status_code == 200
