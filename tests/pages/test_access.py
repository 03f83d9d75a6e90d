"""Every page for every persona: 200, 403 or 404 as the scoping says.

Scoping (DESIGN.md): staff see everything; others their own and their groups' bookings and
sessions; another group's booking or session is a 404, not a 403, so its existence is not told.
"""

from __future__ import annotations

import pytest
from django.urls import reverse

from facility.bookings.models import BookingState
from tests import factories as f
from tests.pages.conftest import at, open_session

pytestmark = pytest.mark.django_db

PERSONAS = ["researcher_a", "leader_a", "researcher_b", "client", "manager"]
OTHER_GROUP = {"researcher_b", "client"}


@pytest.fixture
def things(facility, frozen):
    booking = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_a,
        account=facility.account_a,
        starts_at=at(8, 9),
        ends_at=at(8, 11),
    )
    return {"booking": booking, "session": open_session(facility)}


def _pages(things) -> list[tuple[str, str, bool]]:
    """(name, url, private to group A)."""
    b, s = things["booking"].pk, things["session"].pk
    return [
        ("home", reverse("home"), False),
        ("instruments", reverse("instrument-list"), False),
        ("instrument", reverse("instrument-detail", args=["fe-sem"]), False),
        ("booking form", reverse("booking-new", args=["fe-sem"]), False),
        ("my bookings", reverse("booking-list"), False),
        ("messages", reverse("notification-list"), False),
        ("feeds", reverse("calendar-feeds"), False),
        ("station", reverse("station", args=["fe-sem"]), False),
        ("booking", reverse("booking-detail", args=[b]), True),
        ("cancel", reverse("booking-cancel", args=[b]), True),
        ("session", reverse("session-detail", args=[s]), True),
        ("session live", reverse("session-live", args=[s]), True),
    ]


@pytest.mark.parametrize("persona", PERSONAS)
def test_every_page_for_every_persona(as_user, facility, things, persona):
    client = as_user(getattr(facility, persona))
    for name, url, private in _pages(things):
        expected = 404 if private and persona in OTHER_GROUP else 200
        assert client.get(url).status_code == expected, (persona, name)


def test_a_group_member_who_is_not_the_leader_may_look_but_not_cancel(as_user, facility, things):
    member = f.UserFactory(username="gil.member")
    f.MembershipFactory(user=member, group=facility.group_a)
    client = as_user(member)
    assert client.get(reverse("booking-detail", args=[things["booking"].pk])).status_code == 200
    assert client.get(reverse("booking-cancel", args=[things["booking"].pk])).status_code == 403
    assert client.get(reverse("session-detail", args=[things["session"].pk])).status_code == 200


def test_no_show_is_for_staff(as_user, facility, frozen):
    started = f.BookingFactory(
        instrument=facility.sem,
        user=facility.researcher_b,
        account=facility.account_b,
        starts_at=at(6, 9),
        ends_at=at(6, 11),
    )
    url = reverse("booking-no-show", args=[started.pk])
    assert as_user(facility.researcher_b).post(url).status_code == 403
    detail = as_user(facility.manager).get(reverse("booking-detail", args=[started.pk]))
    assert url in detail.content.decode()
    response = as_user(facility.manager).post(url, {"next": "https://elsewhere.example/"})
    assert response["Location"] == reverse("booking-detail", args=[started.pk])  # stays on site
    started.refresh_from_db()
    assert started.state == BookingState.NO_SHOW


def test_writes_are_post_only(as_user, facility, things):
    client = as_user(facility.researcher_a)
    s = things["session"].pk
    for name in ["check-out", "session-specimen", "session-conditions", "session-upload"]:
        assert client.get(reverse(name, args=[s])).status_code == 405, name
    assert client.get(reverse("check-in", args=["fe-sem"])).status_code == 405
