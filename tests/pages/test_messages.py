"""The messages page lists the signed-in person's notifications and nobody else's."""

from __future__ import annotations

import pytest
from django.urls import reverse

from facility.people.models import Notification

pytestmark = pytest.mark.django_db


def test_messages_are_private_and_links_stay_on_site(as_user, facility, frozen):
    Notification.objects.create(
        user=facility.researcher_a, subject="Charging on your session", link="/sessions/9/"
    )
    Notification.objects.create(
        user=facility.researcher_a, subject="Odd link", link="javascript:alert(1)"
    )
    Notification.objects.create(user=facility.researcher_b, subject="Statement ready")
    html = as_user(facility.researcher_a).get(reverse("notification-list")).content.decode()
    assert '<a href="/sessions/9/">Charging on your session</a>' in html
    assert "Odd link" in html and "javascript:" not in html
    assert "Statement ready" not in html
    assert "2 unread" in html
    # The count in the navigation.
    assert 'aria-label="2 unread"' in html


def test_mark_all_read(client, facility):
    from facility.people.models import Notification
    from facility.people.services import notify

    notify(user=facility.researcher_a, subject="one", email=False)
    notify(user=facility.researcher_a, subject="two", email=False)
    notify(user=facility.researcher_b, subject="not mine", email=False)
    client.force_login(facility.researcher_a)
    assert client.get("/messages/read/").status_code == 405  # a change needs a POST
    response = client.post("/messages/read/", follow=True)
    assert "2 messages marked as read." in response.content.decode()
    assert not Notification.objects.filter(user=facility.researcher_a, read_at__isnull=True)
    assert (
        Notification.objects.filter(user=facility.researcher_b, read_at__isnull=True).count() == 1
    )
