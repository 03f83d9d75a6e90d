"""Booking form, refusals as messages, booking page, cancel with its cost stated first."""

from __future__ import annotations

import pytest
from django.urls import reverse

from facility.bookings.models import Booking, BookingState
from tests import factories as f
from tests.pages.conftest import at

pytestmark = pytest.mark.django_db


def _form(account, start: str, end: str, purpose: str = "own_use") -> dict:
    return {"starts_at": start, "ends_at": end, "account": account.pk, "purpose": purpose}


def test_the_form_is_prefilled_from_the_clicked_slot(as_user, facility, frozen):
    url = reverse("booking-new", args=["fe-sem"])
    html = as_user(facility.researcher_a).get(
        url, {"start": "2030-03-07T11:00", "end": "2030-03-07T12:00"}
    )
    text = html.content.decode()
    assert html.status_code == 200
    assert 'value="2030-03-07T11:00"' in text and 'value="2030-03-07T12:00"' in text
    assert '<label for="id_account">' in text
    # Only the researcher's own group's accounts are offered; service time is for staff.
    assert "KES-01" in text and "LAR-01" not in text
    assert 'value="service"' not in text


def test_booking_a_free_slot(as_user, facility, frozen):
    response = as_user(facility.researcher_a).post(
        reverse("booking-new", args=["fe-sem"]),
        _form(facility.account_a, "2030-03-07T11:00", "2030-03-07T12:30"),
    )
    booking = Booking.objects.get()
    assert response.status_code == 302
    assert response["Location"].endswith("?week=2030-03-04")
    assert (booking.starts_at, booking.ends_at) == (at(7, 11), at(7, 12, 30))
    assert booking.user == facility.researcher_a and booking.account == facility.account_a


def test_a_clashing_slot_is_refused_with_the_reason_and_nothing_written(as_user, facility, frozen):
    f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(7, 11),
        ends_at=at(7, 13),
    )
    response = as_user(facility.researcher_a).post(
        reverse("booking-new", args=["fe-sem"]),
        _form(facility.account_a, "2030-03-07T12:00", "2030-03-07T14:00"),
    )
    text = response.content.decode()
    assert response.status_code == 409
    assert 'role="alert"' in text
    assert "already booked for part of" in text and "choose a free slot" in text
    assert "ben.researcher" not in text  # the refusal never names who holds the slot
    assert Booking.objects.count() == 1


def test_refusals_from_the_rules_are_shown_beside_the_form(as_user, facility, frozen):
    untrained = f.InstrumentFactory(code="tem-2", name="Cryo TEM")
    client = as_user(facility.researcher_a)
    response = client.post(
        reverse("booking-new", args=["tem-2"]),
        _form(facility.account_a, "2030-03-07T11:00", "2030-03-07T12:00"),
    )
    assert response.status_code == 403
    assert "no training record for Cryo TEM" in response.content.decode()
    # A start in the past is named as such, and the field is marked.
    response = client.post(
        reverse("booking-new", args=["fe-sem"]),
        _form(facility.account_a, "2030-03-06T08:00", "2030-03-06T09:00"),
    )
    text = response.content.decode()
    assert response.status_code == 400
    assert "is in the past" in text
    assert 'aria-invalid="true"' in text
    # Ends before it starts: the form's own parsing passes, the rules refuse.
    response = client.post(
        reverse("booking-new", args=["fe-sem"]),
        _form(facility.account_a, "2030-03-07T12:00", "2030-03-07T11:00"),
    )
    assert response.status_code == 400 and "must end after it starts" in response.content.decode()
    assert Booking.objects.filter(instrument=untrained).count() == 0
    assert Booking.objects.count() == 0


def test_another_groups_account_cannot_even_be_chosen(as_user, facility, frozen):
    response = as_user(facility.researcher_a).post(
        reverse("booking-new", args=["fe-sem"]),
        _form(facility.account_b, "2030-03-07T11:00", "2030-03-07T12:00"),
    )
    assert response.status_code == 400
    assert "Select a valid choice" in response.content.decode()
    assert Booking.objects.count() == 0


@pytest.fixture
def tomorrow(facility, frozen):
    return f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(7, 9),  # 22 h 53 min from now: inside the 24 h deadline
        ends_at=at(7, 11),
    )


@pytest.fixture
def next_week(facility, frozen):
    return f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(13, 9),
        ends_at=at(13, 11),
    )


def test_booking_page_scoping(as_user, facility, tomorrow):
    url = reverse("booking-detail", args=[tomorrow.pk])
    assert as_user(facility.researcher_a).get(url).status_code == 200
    assert as_user(facility.leader_a).get(url).status_code == 200  # same group
    assert as_user(facility.manager).get(url).status_code == 200
    assert as_user(facility.researcher_b).get(url).status_code == 404
    assert as_user(facility.client).get(url).status_code == 404


def test_cancelling_late_states_the_charge_before_confirming(as_user, facility, tomorrow):
    client = as_user(facility.researcher_a)
    url = reverse("booking-cancel", args=[tomorrow.pk])
    page = client.get(url).content.decode()
    assert "This would be a late cancellation" in page
    # No tariff in this facility: the page says so (the cost itself: tests/pages/test_billing_pages.py).
    assert "No tariff covers this booking yet" in page
    assert "Wed 6 Mar 2030, 09:00" in page  # the deadline: 24 h before the start
    tomorrow.refresh_from_db()
    assert tomorrow.state == BookingState.CONFIRMED  # looking costs nothing
    response = client.post(url)
    tomorrow.refresh_from_db()
    assert response.status_code == 302
    assert tomorrow.state == BookingState.LATE_CANCELLED


def test_cancelling_early_is_free(as_user, facility, next_week):
    client = as_user(facility.researcher_a)
    url = reverse("booking-cancel", args=[next_week.pk])
    page = client.get(url).content.decode()
    assert "Cancelling now is free" in page
    client.post(url)
    next_week.refresh_from_db()
    assert next_week.state == BookingState.CANCELLED


def test_who_may_cancel(as_user, facility, next_week):
    url = reverse("booking-cancel", args=[next_week.pk])
    member = f.UserFactory(username="gil.member")
    f.MembershipFactory(user=member, group=facility.group_a)
    assert as_user(member).get(url).status_code == 403  # sees it, may not cancel it
    assert as_user(member).post(url).status_code == 403
    assert as_user(facility.researcher_b).post(url).status_code == 404
    next_week.refresh_from_db()
    assert next_week.state == BookingState.CONFIRMED
    assert as_user(facility.leader_a).get(url).status_code == 200  # the group leader may


def test_staff_confirm_a_request(as_user, facility, frozen):
    requested = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(8, 9),
        ends_at=at(8, 10),
        state=BookingState.REQUESTED,
    )
    url = reverse("booking-confirm", args=[requested.pk])
    assert as_user(facility.researcher_b).post(url).status_code == 403
    response = as_user(facility.manager).post(url, {"next": reverse("home")})
    assert response.status_code == 302 and response["Location"] == reverse("home")
    requested.refresh_from_db()
    assert requested.state == BookingState.CONFIRMED


def test_my_bookings_lists_mine_and_for_leaders_the_groups(as_user, facility, tomorrow):
    html = as_user(facility.researcher_a).get(reverse("booking-list")).content.decode()
    assert reverse("booking-detail", args=[tomorrow.pk]) in html
    leader_html = as_user(facility.leader_a).get(reverse("booking-list")).content.decode()
    assert "Your group's bookings" in leader_html
    assert reverse("booking-detail", args=[tomorrow.pk]) in leader_html
    other = as_user(facility.researcher_b).get(reverse("booking-list")).content.decode()
    assert reverse("booking-detail", args=[tomorrow.pk]) not in other
