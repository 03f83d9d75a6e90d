"""Private iCalendar feeds (RFC 5545): signed token, no names of others unless staff."""

from __future__ import annotations

import datetime as dt

import pytest
from django.urls import reverse
from icalendar import Calendar

from facility.bookings.feeds import feed_token
from facility.bookings.models import BookingState
from tests import factories as f
from tests.pages.conftest import at

pytestmark = pytest.mark.django_db


@pytest.fixture
def bookings(facility, frozen):
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
        ends_at=at(8, 14),
    )
    f.BookingFactory(  # cancelled: not in any feed
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(9, 9),
        ends_at=at(9, 10),
        state=BookingState.CANCELLED,
        cancelled_at=at(5, 9),
    )
    return {"mine": mine, "theirs": theirs}


def _events(response) -> list:
    assert response.status_code == 200
    assert response["Content-Type"].startswith("text/calendar")
    cal = Calendar.from_ical(response.content)
    # RFC 5545 §3.6 and §3.7: a calendar needs PRODID and VERSION 2.0; each VEVENT a UID and
    # a DTSTAMP.
    assert cal.get("version") == "2.0" and cal.get("prodid")
    events = list(cal.walk("VEVENT"))
    for event in events:
        assert event.get("uid") and event.get("dtstamp")
    return events


def test_personal_feed_holds_my_live_bookings(client, facility, bookings):
    url = reverse("feed-personal", args=[feed_token(facility.researcher_a)])
    events = _events(client.get(url))  # no sign-in: the token is the credential
    assert len(events) == 1
    event = events[0]
    assert event.decoded("dtstart") == at(7, 9).astimezone(dt.UTC)
    assert event.decoded("dtend") == at(7, 11).astimezone(dt.UTC)
    assert str(event.get("summary")) == "Field-emission SEM"
    assert "KES-01" in str(event.get("description"))
    assert str(event.get("uid")) == f"booking-{bookings['mine'].pk}@testserver"


def test_instrument_feed_names_nobody_else_unless_staff(client, facility, bookings):
    url = reverse("feed-instrument", args=[feed_token(facility.researcher_a), "fe-sem"])
    summaries = sorted(str(e.get("summary")) for e in _events(client.get(url)))
    assert summaries == ["Field-emission SEM: booked", "Field-emission SEM: your booking"]
    staff_url = reverse("feed-instrument", args=[feed_token(facility.manager), "fe-sem"])
    staff = sorted(str(e.get("summary")) for e in _events(client.get(staff_url)))
    assert f"Field-emission SEM: {facility.researcher_b.get_full_name()}" in staff


def test_wrong_edited_or_stale_tokens_are_404(client, facility, bookings):
    token = feed_token(facility.researcher_a)
    head, digest = token.split("-")
    flipped = digest[:-1] + ("0" if digest[-1] != "0" else "1")
    for bad in [f"{head}-{flipped}", f"{facility.researcher_b.pk}-{digest}", "nonsense", "7-"]:
        assert client.get(reverse("feed-personal", args=[bad])).status_code == 404, bad
    # Changing the password retires every old feed address.
    facility.researcher_a.set_password("a-new-password-77")
    facility.researcher_a.save()
    assert client.get(reverse("feed-personal", args=[token])).status_code == 404
    fresh = feed_token(facility.researcher_a)
    assert fresh != token
    assert client.get(reverse("feed-personal", args=[fresh])).status_code == 200


def test_feeds_page_shows_my_addresses(as_user, facility, frozen):
    html = as_user(facility.researcher_a).get(reverse("calendar-feeds")).content.decode()
    token = feed_token(facility.researcher_a)
    assert f"http://testserver/calendar/{token}/bookings.ics" in html
    assert f"http://testserver/calendar/{token}/instruments/fe-sem.ics" in html
    assert '<label for="feed-mine">' in html
