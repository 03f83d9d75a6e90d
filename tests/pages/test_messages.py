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
