"""Every model of the domain apps is in the admin, and its pages work for a superuser.

The N+1 check is the usual way to pin a list page's query count (common practice, no source):
doubling the rows must not add queries.
"""

from __future__ import annotations

import datetime as dt

import pytest
from django.contrib import admin
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from facility.logbook.models import Assessment, Flag, FlagCode, Micrograph
from facility.people.models import Notification
from tests import factories as f

pytestmark = pytest.mark.django_db

DOMAIN_APPS = {"people", "instruments", "bookings", "logbook"}


def _domain_models():
    return [m for m in admin.site._registry if m._meta.app_label in DOMAIN_APPS]


def _one_of_everything(n: int) -> None:
    """One row of every domain model, linked the way real data is."""
    group = f.GroupFactory(name=f"Admin test group {n}")
    user = f.UserFactory(username=f"admin-test-user-{n}")
    f.MembershipFactory(user=user, group=group)
    account = f.AccountFactory(group=group)
    instrument = f.InstrumentFactory(code=f"admin-sem-{n}")
    f.PumpFactory(instrument=instrument)
    f.TrainingRecordFactory(user=user, instrument=instrument)
    booking = f.BookingFactory(instrument=instrument, user=user, account=account)
    specimen = f.SpecimenFactory(owner=user, group=group)
    coating = f.CoatingFactory(specimen=specimen)
    start = timezone.now() - dt.timedelta(days=n + 1)
    session = f.InstrumentSessionFactory(
        instrument=instrument,
        operator=user,
        account=account,
        booking=booking,
        specimen=specimen,
        coating=coating,
        started_at=start,
        ended_at=start + dt.timedelta(hours=2),
    )
    conditions = f.ConditionsFactory(session=session)
    micrograph = Micrograph.objects.create(
        session=session, conditions=conditions, sha256=f"{n:064d}", original_name=f"img{n}.tif"
    )
    Assessment.objects.create(micrograph=micrograph, analysis_version="test", resolution_nm=3.0)
    Flag.objects.create(session=session, code=FlagCode.CHARGING_RISK, message="Charging likely.")
    Notification.objects.create(user=user, subject=f"Note {n}")


@pytest.fixture
def superuser_client(client):
    boss = f.UserFactory(username="admin-boss", is_staff=True, is_superuser=True)
    client.force_login(boss)
    return client


def test_every_domain_model_is_registered():
    registered = {m._meta.model_name for m in _domain_models()}
    from django.apps import apps

    expected = {
        m._meta.model_name
        for label in DOMAIN_APPS
        for m in apps.get_app_config(label).get_models()
        if not m._meta.model_name.startswith("historical")
    }
    assert expected <= registered, expected - registered


def test_changelist_add_and_change_pages_show_the_data(superuser_client):
    _one_of_everything(1)
    from django.contrib.auth import get_user_model

    for model in [*_domain_models(), get_user_model()]:
        opts = model._meta
        changelist = superuser_client.get(
            reverse(f"admin:{opts.app_label}_{opts.model_name}_changelist")
        )
        assert changelist.status_code == 200, opts.label
        assert changelist.context["cl"].result_count >= 1, opts.label
        add = superuser_client.get(reverse(f"admin:{opts.app_label}_{opts.model_name}_add"))
        assert add.status_code == 200, opts.label
        obj = model.objects.first()
        change = superuser_client.get(
            reverse(f"admin:{opts.app_label}_{opts.model_name}_change", args=[obj.pk])
        )
        assert change.status_code == 200, opts.label
        if hasattr(model, "history"):
            history = superuser_client.get(
                reverse(f"admin:{opts.app_label}_{opts.model_name}_history", args=[obj.pk])
            )
            assert history.status_code == 200, opts.label


def test_changelists_do_not_query_per_row(superuser_client):
    _one_of_everything(1)
    urls = [
        reverse(f"admin:{m._meta.app_label}_{m._meta.model_name}_changelist")
        for m in _domain_models()
    ]

    def queries() -> dict[str, int]:
        counts = {}
        for url in urls:
            with CaptureQueriesContext(connection) as captured:
                assert superuser_client.get(url).status_code == 200
            counts[url] = len(captured)
        return counts

    before = queries()
    _one_of_everything(2)
    _one_of_everything(3)
    assert queries() == before
