"""Tariff versions: added, never overlapping, never edited once a final statement used them."""

from __future__ import annotations

import datetime as dt
from decimal import Decimal

import pytest
from django.db import IntegrityError, transaction

from facility.billing import queries, services
from facility.billing.models import Tariff
from facility.errors import Closed, Conflict, Invalid, NotAllowed
from tests.billing.helpers import add_tariff, at, draft, log_session

pytestmark = pytest.mark.django_db


def test_a_new_version_closes_the_open_one(facility):
    first = add_tariff(facility)
    second = add_tariff(facility, hourly_rate="85.00", valid_from=dt.date(2027, 7, 1))
    first.refresh_from_db()
    assert first.valid_to == dt.date(2027, 6, 30)
    assert second.valid_to is None
    assert (
        queries.tariff_in_force(facility.sem.id, "internal", "own_use", dt.date(2027, 6, 30))
        == first
    )
    assert (
        queries.tariff_in_force(facility.sem.id, "internal", "own_use", dt.date(2027, 7, 1))
        == second
    )
    assert first.history.count() == 2  # created, then closed (django-simple-history)


def test_overlapping_versions_are_refused(facility):
    add_tariff(facility, valid_to=dt.date(2027, 6, 30))
    with pytest.raises(Conflict, match="overlap"):
        add_tariff(facility, hourly_rate="90.00", valid_from=dt.date(2027, 6, 1))
    assert Tariff.objects.count() == 1


def test_a_version_that_billed_later_days_is_not_shortened(facility, clock):
    add_tariff(facility)
    log_session(facility, at(20, 9), at(20, 10))
    services.finalise_statement(statement=draft(facility), by=facility.manager)
    with pytest.raises(Conflict, match="already priced sessions on or after 2027-03-10"):
        add_tariff(facility, hourly_rate="90.00", valid_from=dt.date(2027, 3, 10))
    # From April is fine: nothing after 1 April was billed at the old rate.
    assert add_tariff(facility, hourly_rate="90.00", valid_from=dt.date(2027, 4, 1)).pk


def test_unused_versions_may_be_corrected_and_drafts_follow(facility):
    tariff = add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    assert draft(facility).total == Decimal("80.00")
    services.update_tariff(tariff=tariff, by=facility.manager, hourly_rate="88.00")
    assert draft(facility).total == Decimal("88.00")


def test_used_versions_are_not_edited(facility, clock):
    tariff = add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    services.finalise_statement(statement=draft(facility), by=facility.manager)
    with pytest.raises(Closed, match="add a new version"):
        services.update_tariff(tariff=tariff, by=facility.manager, minimum_charge="5.00")
    tariff.refresh_from_db()
    assert tariff.minimum_charge == Decimal("0.00")


@pytest.mark.parametrize(
    ("terms", "fragment"),
    [
        ({"hourly_rate": 80.0}, "not a float"),
        ({"hourly_rate": "-1.00"}, "must not be negative"),
        ({"hourly_rate": "80.001"}, "more than two decimal places"),
        ({"increment_minutes": 0}, "from 1 to 1440"),
        ({"late_cancellation_share": "1.5"}, "between 0 and 1"),
        ({"out_of_hours_factor": "0"}, "more than 0"),
        ({"currency": "euro"}, "ISO 4217"),
        ({"charge_basis": "whatever"}, "Charge basis"),
        ({"valid_to": dt.date(2026, 12, 31)}, "on or after the day it starts"),
        ({"rate_category": "vip"}, "Rate category"),
    ],
)
def test_refusals(facility, terms, fragment):
    with pytest.raises(Invalid, match=fragment):
        add_tariff(facility, **terms)
    assert not Tariff.objects.exists()


def test_only_staff_set_tariffs(facility):
    with pytest.raises(NotAllowed):
        add_tariff(facility, by=facility.leader_a)


def test_database_checks_hold_without_the_service(facility):
    # Check constraints refuse an impossible tariff written directly (both databases).
    with pytest.raises(IntegrityError), transaction.atomic():
        Tariff.objects.create(
            instrument=facility.sem,
            rate_category="internal",
            purpose="own_use",
            hourly_rate=Decimal("10.00"),
            no_show_share=Decimal("2.000"),
            valid_from=dt.date(2027, 1, 1),
        )


@pytest.mark.postgres
def test_postgres_refuses_overlapping_versions_written_directly(facility):
    add_tariff(facility)  # open-ended from 2027-01-01
    with pytest.raises(IntegrityError, match="tariff_versions_no_overlap"), transaction.atomic():
        Tariff.objects.create(
            instrument=facility.sem,
            rate_category="internal",
            purpose="own_use",
            hourly_rate=Decimal("10.00"),
            valid_from=dt.date(2027, 5, 1),
        )


def test_a_bounded_version_inside_an_open_one_is_refused(facility):
    # Closing the open version for a one-month price would leave no tariff after it.
    add_tariff(facility)
    with pytest.raises(Conflict, match="overlap"):
        add_tariff(
            facility,
            hourly_rate="70.00",
            valid_from=dt.date(2027, 7, 1),
            valid_to=dt.date(2027, 7, 31),
        )


def _form(fac, **changes):
    data = {
        "instrument": fac.sem.pk,
        "rate_category": "internal",
        "purpose": "own_use",
        "hourly_rate": "95.00",
        "staff_hourly_rate": "0.00",
        "currency": "EUR",
        "increment_minutes": "15",
        "minimum_charge": "0.00",
        "out_of_hours_factor": "1.000",
        "charge_basis": "used",
        "late_cancellation_share": "0.000",
        "no_show_share": "0.000",
        "valid_from": "2027-05-01",
        "valid_to": "",
        "note": "",
    }
    data.update(changes)
    return data


def test_admin_adds_a_version_through_the_service(facility, admin_client):
    from django.urls import reverse

    first = add_tariff(facility)
    url = reverse("admin:billing_tariff_add")
    assert admin_client.post(url, _form(facility)).status_code == 302
    first.refresh_from_db()
    assert first.valid_to == dt.date(2027, 4, 30)
    assert Tariff.objects.get(valid_from=dt.date(2027, 5, 1)).hourly_rate == Decimal("95.00")
    # An overlapping bounded version is shown as a form error and writes nothing.
    page = admin_client.post(url, _form(facility, valid_from="2027-06-01", valid_to="2027-06-30"))
    assert page.status_code == 200 and b"may not overlap" in page.content
    assert page.context["adminform"].form.errors
    bad = admin_client.post(url, _form(facility, valid_from="2027-08-01", hourly_rate="-5.00"))
    assert b"must not be negative" in bad.content
    assert Tariff.objects.count() == 2
