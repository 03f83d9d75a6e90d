"""Instrument list with live state; the instrument page with its week calendar."""

from __future__ import annotations

import re

import pytest
from django.urls import reverse

from facility.bookings.models import BookingState
from tests import factories as f
from tests.pages.conftest import at, closed_session, open_session

pytestmark = pytest.mark.django_db


@pytest.fixture
def week(facility, frozen):
    mine = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(7, 9),
        ends_at=at(7, 11),
    )
    theirs = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(8, 13),
        ends_at=at(8, 14, 30),
    )
    return {"mine": mine, "theirs": theirs}


def test_list_shows_each_instruments_state_now(as_user, facility, frozen):
    tem = f.InstrumentFactory(code="tem-1", name="Transmission EM", out_of_service=True)
    coater = f.InstrumentFactory(code="coater", name="Sputter coater")
    open_session(facility, operator=facility.researcher_b, account=facility.account_b)
    f.BookingFactory(
        instrument=coater,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(6, 15),
        ends_at=at(6, 16),
    )
    response = as_user(facility.researcher_a).get(reverse("instrument-list"))
    html = response.content.decode()
    assert response.status_code == 200
    assert "In use since 09:27" in html  # the open session started 40 min before 10:07
    # Researchers are not told who is at another instrument.
    assert facility.researcher_b.get_full_name() not in html
    assert "ben.researcher" not in html
    assert "Out of service" in html and tem.name in html
    assert "Next booking today at 15:00" in html
    assert "You are trained: independent" in html


def test_calendar_hides_other_peoples_names_unless_staff(as_user, facility, week):
    url = reverse("instrument-detail", args=["fe-sem"])
    html = as_user(facility.researcher_a).get(url).content.decode()
    assert "Your booking" in html
    assert reverse("booking-detail", args=[week["mine"].pk]) in html
    assert "Booked<br>" in html
    assert reverse("booking-detail", args=[week["theirs"].pk]) not in html
    assert facility.researcher_b.get_full_name() not in html.split("Who is trained")[0]

    staff_html = as_user(facility.manager).get(url).content.decode()
    assert reverse("booking-detail", args=[week["theirs"].pk]) in staff_html
    assert facility.researcher_b.get_full_name() in staff_html.split("Who is trained")[0]


def test_free_slots_link_to_the_booking_form_and_past_ones_do_not(as_user, facility, week):
    html = as_user(facility.researcher_a).get(reverse("instrument-detail", args=["fe-sem"]))
    html = html.content.decode()
    book = reverse("booking-new", args=["fe-sem"])
    # Thursday 11:00 follows my booking: a free hour is proposed.
    assert f"{book}?start=2030-03-07T11:00&amp;end=2030-03-07T12:00" in html
    # Friday 12:30 is free but the next booking starts 13:00 the same day: half an hour.
    assert f"{book}?start=2030-03-08T12:30&amp;end=2030-03-08T13:00" in html
    # Wednesday 09:30 is before now (10:07): not bookable from the calendar.
    assert "start=2030-03-06T09:30" not in html
    assert "start=2030-03-06T10:00" not in html  # the slot now is running
    assert "start=2030-03-06T10:30" in html
    # Booking blocks span their slots: 09:00–11:00 is four half-hour rows.
    assert re.search(r'class="slot block mine" rowspan="4"', html)


def test_week_navigation_and_bad_week_parameter(as_user, facility, week):
    client = as_user(facility.researcher_a)
    url = reverse("instrument-detail", args=["fe-sem"])
    html = client.get(url, {"week": "2030-03-13"}).content.decode()
    assert "Week of 11 March 2030" in html  # any day picks its Monday
    assert "Your booking" not in html
    html = client.get(url, {"week": "soon"}).content.decode()
    assert "Week of 4 March 2030" in html


def test_unknown_instrument_is_404(as_user, facility):
    client = as_user(facility.researcher_a)
    assert client.get(reverse("instrument-detail", args=["no-such"])).status_code == 404
    assert client.get(reverse("station", args=["no-such"])).status_code == 404


def test_recent_sessions_are_scoped_to_the_viewers_groups(as_user, facility, frozen):
    ours = closed_session(facility, at(4, 9), 2.0)
    theirs = closed_session(
        facility, at(5, 9), 1.0, operator=facility.researcher_b, account=facility.account_b
    )
    url = reverse("instrument-detail", args=["fe-sem"])
    html_a = as_user(facility.researcher_a).get(url).content.decode()
    html_b = as_user(facility.researcher_b).get(url).content.decode()
    html_leader = as_user(facility.leader_a).get(url).content.decode()
    session_url = reverse("session-detail", args=[ours.pk])
    assert session_url in html_a and session_url in html_leader
    assert session_url not in html_b
    assert reverse("session-detail", args=[theirs.pk]) in html_b


def test_who_is_trained(as_user, facility, frozen):
    html = as_user(facility.researcher_b).get(reverse("instrument-detail", args=["fe-sem"]))
    section = html.content.decode().split("Who is trained")[1].split("</section>")[0]
    for person in (facility.researcher_a, facility.researcher_b, facility.client):
        assert person.get_full_name() in section
    assert "independent" in section


def test_requested_bookings_are_marked(as_user, facility, frozen):
    f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(7, 14),
        ends_at=at(7, 15),
        state=BookingState.REQUESTED,
    )
    html = as_user(facility.researcher_a).get(reverse("instrument-detail", args=["fe-sem"]))
    assert "Booked (requested)" in html.content.decode()


def test_instrument_page_query_count_is_pinned(as_user, facility, week, django_assert_num_queries):
    closed_session(facility, at(4, 9), 2.0)
    researcher = as_user(facility.researcher_a)
    staff = as_user(facility.manager)
    url = reverse("instrument-detail", args=["fe-sem"])
    # session + user, instrument, week's bookings, trained, group ids, recent sessions, open
    # session, unread count.
    with django_assert_num_queries(9):
        assert researcher.get(url).status_code == 200
    # Staff see every session: no group lookup; they also see the upkeep counters of its one
    # counter, the Schottky emitter (5: pumps, limits, service events, meter readings, first
    # session; calendar time, so no sessions are read).
    with django_assert_num_queries(13):
        assert staff.get(url).status_code == 200
