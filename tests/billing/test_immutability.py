"""A final statement never changes: every write path refuses — services, the admin, and on
PostgreSQL the database itself (raw SQL too). Each refusal leaves the statement as it was.

(The REST endpoints are written in a later issue; they call these same services.)
"""

from __future__ import annotations

from decimal import Decimal

import pytest
from django.db import IntegrityError, connection, transaction
from django.urls import reverse

from facility.billing import queries, services
from facility.billing.models import Charge, ChargeKind, Statement, StatementState
from facility.errors import Closed
from tests.billing.helpers import MARCH, add_tariff, at, draft, log_session


@pytest.fixture
def final(facility, clock):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 11))  # 160.00
    log_session(facility, at(3, 9), at(3, 10))  # 80.00
    return services.finalise_statement(statement=draft(facility), by=facility.manager)


def _unchanged(statement):
    fresh = Statement.objects.get(pk=statement.pk)
    assert fresh.state == StatementState.FINAL
    assert fresh.total == Decimal("240.00")
    assert fresh.lines.count() == 2
    assert queries.checksum_matches(fresh)


# --- services -------------------------------------------------------------------------------


def test_services_refuse(final, facility):
    with pytest.raises(Closed):
        services.finalise_statement(statement=final, by=facility.manager)
    with pytest.raises(Closed):
        services.draft_statement(account=facility.account_a, month=MARCH, by=facility.manager)
    with pytest.raises(Closed):
        services.add_adjustment(
            account=facility.account_a,
            amount="1.00",
            reason="try",
            by=facility.manager,
            month=MARCH,
        )
    line = final.lines.first()
    with pytest.raises(Closed):
        services.remove_adjustment(line=line, by=facility.manager)
    tariff = line.tariff
    with pytest.raises(Closed, match="not edited in place"):
        services.update_tariff(tariff=tariff, by=facility.manager, hourly_rate="1.00")
    _unchanged(final)


# --- admin ----------------------------------------------------------------------------------


def test_admin_shows_a_final_statement_read_only(final, admin_client):
    url = reverse("admin:billing_statement_change", args=[final.pk])
    page = admin_client.get(url)
    assert page.status_code == 200
    assert b'name="_save"' not in page.content  # a view page, no save button
    assert admin_client.post(url, {"account": final.account_id}).status_code == 403
    delete = reverse("admin:billing_statement_delete", args=[final.pk])
    assert admin_client.get(delete).status_code == 403
    assert admin_client.post(delete, {"post": "yes"}).status_code == 403
    _unchanged(final)


def test_admin_bulk_delete_leaves_final_statements(final, admin_client):
    url = reverse("admin:billing_statement_changelist")
    admin_client.post(
        url,
        {"action": "delete_selected", "_selected_action": [final.pk], "post": "yes"},
    )
    _unchanged(final)


def test_admin_lines_cannot_be_changed_or_deleted(final, admin_client):
    line = final.lines.first()
    change = reverse("admin:billing_charge_change", args=[line.pk])
    assert admin_client.post(change, {"amount": "0.00"}).status_code == 403
    delete = reverse("admin:billing_charge_delete", args=[line.pk])
    assert admin_client.post(delete, {"post": "yes"}).status_code == 403
    assert admin_client.get(reverse("admin:billing_charge_add")).status_code == 403
    _unchanged(final)


def test_admin_used_tariff_is_read_only(final, admin_client):
    tariff = final.lines.first().tariff
    url = reverse("admin:billing_tariff_change", args=[tariff.pk])
    page = admin_client.get(url)
    assert page.status_code == 200
    assert b'name="hourly_rate"' not in page.content
    admin_client.post(url, {"hourly_rate": "1.00"})
    tariff.refresh_from_db()
    assert tariff.hourly_rate == Decimal("80.00")


def test_admin_may_delete_a_draft(facility, admin_client):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 11))
    statement = draft(facility)
    delete = reverse("admin:billing_statement_delete", args=[statement.pk])
    assert admin_client.post(delete, {"post": "yes"}).status_code == 302
    assert not Statement.objects.exists()


def test_admin_finalise_action_calls_the_service(facility, clock, admin_client, admin_user):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 11))
    statement = draft(facility)
    url = reverse("admin:billing_statement_changelist")
    admin_client.post(url, {"action": "finalise", "_selected_action": [statement.pk]})
    statement.refresh_from_db()
    assert statement.state == StatementState.FINAL
    assert statement.finalised_by == admin_user


# --- PostgreSQL: the database refuses, whatever the client -----------------------------------


def _refused(sql, params):
    with (
        pytest.raises(IntegrityError, match="final"),
        transaction.atomic(),
        connection.cursor() as cursor,
    ):
        cursor.execute(sql, params)


@pytest.mark.postgres
def test_postgres_refuses_raw_changes_to_final_lines(final):
    line = final.lines.first()
    _refused("UPDATE billing_charge SET amount = 0 WHERE id = %s", [line.pk])
    _refused("UPDATE billing_charge SET description = 'x' WHERE statement_id = %s", [final.pk])
    _refused("DELETE FROM billing_charge WHERE id = %s", [line.pk])
    _refused(
        "INSERT INTO billing_charge (statement_id, position, kind, currency, amount, description,"
        " reason, billed_minutes, out_of_hours_minutes, staff_minutes, purpose, created_by_id,"
        " created_at) VALUES (%s, 9, 'adjustment', 'EUR', -5, 'x', 'x', 0, 0, 0, '', %s, now())",
        [final.pk, final.finalised_by_id],
    )
    with pytest.raises(IntegrityError), transaction.atomic():
        Charge.objects.filter(statement=final).update(amount=Decimal("1.00"))  # the ORM too
    _unchanged(final)


@pytest.mark.postgres
def test_postgres_refuses_raw_changes_to_the_final_statement(final):
    _refused("UPDATE billing_statement SET total = 0 WHERE id = %s", [final.pk])
    _refused("UPDATE billing_statement SET state = 'draft' WHERE id = %s", [final.pk])
    _refused("DELETE FROM billing_statement WHERE id = %s", [final.pk])
    _unchanged(final)


@pytest.mark.postgres
def test_postgres_lets_drafts_change(facility, clock):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 11))
    statement = draft(facility)
    with connection.cursor() as cursor:
        cursor.execute(
            "UPDATE billing_charge SET amount = 1 WHERE statement_id = %s", [statement.pk]
        )
        cursor.execute("UPDATE billing_statement SET total = 1 WHERE id = %s", [statement.pk])
    # …and redrafting puts the data back: drafts follow the logbook.
    assert draft(facility).total == Decimal("160.00")
    assert draft(facility).lines.get().kind == ChargeKind.USE
