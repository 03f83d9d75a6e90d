"""The demo's reset deletes rows that protect a demo row, so `--reset` cannot get stuck."""

from __future__ import annotations

import pytest

from facility.bookings.models import Booking
from facility.demo.cleanup import _delete
from facility.people.models import Account
from tests import factories as f

pytestmark = pytest.mark.django_db


def test_delete_removes_the_rows_that_protect_it_first():
    # Booking.account is PROTECT, and Charge-like rows of other apps protect sessions the same way.
    booking = f.BookingFactory()
    other = f.BookingFactory()

    removed = _delete(Account.objects.filter(pk=booking.account_id))

    assert removed >= 2  # the account and the booking that held it
    assert not Account.objects.filter(pk=booking.account_id).exists()
    assert not Booking.objects.filter(pk=booking.pk).exists()
    assert Booking.objects.filter(pk=other.pk).exists()  # unrelated rows stay
