"""Sign-in and sign-out use Django's auth views with our templates."""

from __future__ import annotations

import pytest
from django.urls import reverse

pytestmark = pytest.mark.django_db


def test_pages_need_a_sign_in(client, facility):
    for name, args in [
        ("home", []),
        ("instrument-list", []),
        ("instrument-detail", ["fe-sem"]),
        ("booking-list", []),
        ("notification-list", []),
        ("calendar-feeds", []),
        ("station", ["fe-sem"]),
    ]:
        url = reverse(name, args=args)
        response = client.get(url)
        assert response.status_code == 302, url
        assert response["Location"].startswith(reverse("login") + "?next=")


def test_sign_in_page_labels_its_fields(client, facility):
    response = client.get(reverse("login"))
    html = response.content.decode()
    assert response.status_code == 200
    assert '<label for="id_username">' in html
    assert '<label for="id_password">' in html


def test_wrong_password_is_said_in_words(client, facility):
    response = client.post(
        reverse("login"), {"username": "ada.researcher", "password": "not-the-password"}
    )
    assert response.status_code == 200
    assert "do not match an account" in response.content.decode()
    assert "_auth_user_id" not in client.session


def test_sign_in_then_out(client, facility):
    response = client.post(
        reverse("login"), {"username": "ada.researcher", "password": "correct-horse-42"}
    )
    assert response.status_code == 302
    assert response["Location"] == reverse("home")
    assert client.get(reverse("home")).status_code == 200
    # Django 5 signs out on POST only, so a link cannot sign someone out.
    assert client.get(reverse("logout")).status_code == 405
    response = client.post(reverse("logout"))
    assert response.status_code == 302
    assert client.get(reverse("home")).status_code == 302
