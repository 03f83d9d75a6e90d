"""The check-in / check-out page at the microscope."""

from __future__ import annotations

import pytest
from django.urls import reverse

from facility.bookings.models import BookingState
from facility.logbook.models import InstrumentSession
from tests import factories as f
from tests.pages.conftest import at, open_session

pytestmark = pytest.mark.django_db


def test_check_in_for_my_booking(as_user, facility, frozen):
    booking = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(6, 10, 30),  # starts in 23 minutes: check-in is open from 30 before
        ends_at=at(6, 12),
    )
    client = as_user(facility.researcher_a)
    page = client.get(reverse("station", args=["fe-sem"])).content.decode()
    assert "Your booking: <strong>10:30–12:00</strong>" in page
    assert "btn-huge" in page and ">Check in<" in page
    response = client.post(reverse("check-in", args=["fe-sem"]), {"booking": booking.pk})
    session = InstrumentSession.objects.get()
    assert response.status_code == 302
    assert response["Location"] == reverse("session-detail", args=[session.pk])
    assert session.booking == booking and session.account == facility.account_a


def test_walk_up_needs_an_account_and_says_so(as_user, facility, frozen):
    client = as_user(facility.researcher_a)
    page = client.get(reverse("station", args=["fe-sem"])).content.decode()
    assert "Check in without a booking" in page
    assert '<label for="id_account">' in page
    response = client.post(reverse("check-in", args=["fe-sem"]), {}, follow=True)
    assert "needs an account to charge" in response.content.decode()
    assert InstrumentSession.objects.count() == 0
    client.post(reverse("check-in", args=["fe-sem"]), {"account": facility.account_a.pk})
    assert InstrumentSession.objects.get().account == facility.account_a


def test_walk_up_refused_while_someone_else_has_the_slot(as_user, facility, frozen):
    f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(6, 10),
        ends_at=at(6, 12),
    )
    response = as_user(facility.researcher_a).post(
        reverse("check-in", args=["fe-sem"]), {"account": facility.account_a.pk}, follow=True
    )
    assert "booked by someone else right now" in response.content.decode()
    assert InstrumentSession.objects.count() == 0


def test_in_use_shows_a_name_only_to_staff(as_user, facility, frozen):
    open_session(facility, operator=facility.researcher_b, account=facility.account_b)
    url = reverse("station", args=["fe-sem"])
    page = as_user(facility.researcher_a).get(url).content.decode()
    assert "In use since <strong>09:27</strong>." in page
    assert facility.researcher_b.get_full_name() not in page
    staff_page = as_user(facility.manager).get(url).content.decode()
    assert f"by {facility.researcher_b.get_full_name()}" in staff_page


def test_check_out(as_user, facility, frozen):
    booking = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(6, 9),
        ends_at=at(6, 11),
    )
    session = open_session(facility, booking=booking)
    client = as_user(facility.researcher_a)
    station_url = reverse("station", args=["fe-sem"])
    assert ">Check out<" in client.get(station_url).content.decode()
    response = client.post(
        reverse("check-out", args=[session.pk]),
        {"beam_on_hours": "0.5", "vent_cycles": "2", "next": station_url},
        follow=True,
    )
    assert "Checked out of Field-emission SEM after 0 h 40 min" in response.content.decode()
    session.refresh_from_db()
    booking.refresh_from_db()
    assert session.ended_at is not None and session.vent_cycles == 2
    assert str(session.beam_on_hours) == "0.50"
    assert booking.state == BookingState.DONE


def test_check_out_refusals(as_user, facility, frozen):
    session = open_session(facility)
    url = reverse("check-out", args=[session.pk])
    assert as_user(facility.researcher_b).post(url, {"vent_cycles": 0}).status_code == 404
    assert as_user(facility.leader_a).post(url, {"vent_cycles": 0}).status_code == 403
    response = as_user(facility.researcher_a).post(
        url, {"beam_on_hours": "3", "vent_cycles": 0}, follow=True
    )
    # 40 minutes in the chamber cannot hold three hours of beam.
    assert "Beam-on time must be between 0 and the session" in response.content.decode()
    session.refresh_from_db()
    assert session.ended_at is None
