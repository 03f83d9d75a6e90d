"""Drafting, finalising and correcting statements: the rules and their refusals."""

from __future__ import annotations

import datetime as dt
import hashlib
from decimal import Decimal

import pytest
from django.db import connection

from facility.billing import queries, services, tasks
from facility.billing.models import Charge, ChargeKind, Statement, StatementState
from facility.errors import Closed, Conflict, Invalid, NotAllowed
from facility.people.models import Notification
from tests import factories as f
from tests.billing.helpers import MARCH, add_tariff, at, draft, log_booking, log_session

APRIL = dt.date(2027, 4, 1)


def _line_values(statement):
    skip = {"id", "created_at", "statement"}
    return [
        {k: v for k, v in row.items() if k not in skip}
        for row in Charge.objects.filter(statement=statement).order_by("position").values()
    ]


@pytest.fixture
def month_of_use(facility):
    add_tariff(facility, out_of_hours_factor="1.5", no_show_share="1")
    log_session(facility, at(2, 9), at(2, 11))  # 160.00
    log_session(facility, at(3, 17), at(3, 19))  # 80.00 + 120.00 = 200.00
    log_booking(facility, at(4, 9), at(4, 10), state="no_show")  # 80.00
    log_session(
        facility, at(5, 9), at(5, 10), user=facility.researcher_b, account=facility.account_b
    )
    add_tariff(facility, purpose="service", hourly_rate="0.00")
    return facility


def test_drafting_twice_gives_the_same_lines(month_of_use, clock):
    fac = month_of_use
    first = draft(fac)
    before = _line_values(first)
    second = draft(fac)
    assert second.pk == first.pk
    assert _line_values(second) == before
    assert second.total == Decimal("440.00")  # 160.00 + 200.00 + 80.00


def test_draft_month_covers_every_account_and_notifies_staff_once(month_of_use, clock):
    run = services.draft_month(month=MARCH, tell_staff=True)
    assert len(run.statements) == 2
    assert run.totals == {"EUR": Decimal("520.00")}  # 440.00 (A) + 80.00 (B, 1 h)
    assert run.as_dict()["totals"] == {"EUR": "520.00"}  # strings when serialised
    services.draft_month(month=MARCH, tell_staff=True)
    told = Notification.objects.filter(user=month_of_use.manager)
    assert told.count() == 1
    assert "2 draft statements with 4 lines" in told.get().body


def test_beat_job_drafts_the_previous_month(month_of_use, clock):
    summary = tasks.draft_previous_month.delay().get()  # eager in tests; today is 2 April
    assert summary["month"] == "2027-03"
    assert summary["statements"] == 2
    assert Statement.objects.filter(month=MARCH, state=StatementState.DRAFT).count() == 2


def test_service_sessions_without_a_tariff_are_not_billed(facility):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10), purpose="service", user=facility.manager)
    assert draft(facility) is None


def test_missing_tariff_is_a_problem_that_blocks_finalising(facility, clock):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    log_session(facility, at(2, 11), at(2, 12), purpose="training")
    statement = draft(facility)
    assert statement.lines.count() == 1
    assert "no internal tariff for training" in statement.problems[0]
    with pytest.raises(Conflict, match="cannot be finalised yet"):
        services.finalise_statement(statement=statement, by=facility.manager)
    assert Statement.objects.get(pk=statement.pk).state == StatementState.DRAFT


def test_an_open_session_blocks_finalising(facility, clock):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    log_session(facility, at(31, 20), None)
    statement = draft(facility)
    assert "still checked in" in statement.problems[0]
    with pytest.raises(Conflict, match="still checked in"):
        services.finalise_statement(statement=statement, by=facility.manager)


def test_finalise_numbers_in_sequence_and_seals(
    month_of_use, clock, django_capture_on_commit_callbacks
):
    fac = month_of_use
    services.draft_month(month=MARCH)
    a = Statement.objects.get(account=fac.account_a)
    b = Statement.objects.get(account=fac.account_b)
    final_b = services.finalise_statement(statement=b, by=fac.manager)
    with django_capture_on_commit_callbacks(execute=True):
        final_a = services.finalise_statement(statement=a, by=fac.manager)
    assert (final_b.number, final_a.number) == (1, 2)
    assert final_a.reference == "S-000002"
    assert final_a.finalised_by == fac.manager
    assert len(final_a.checksum) == 64 and queries.checksum_matches(final_a)
    # The leader of group A is told once the statement is final.
    assert Notification.objects.filter(user=fac.leader_a, topic=f"billing:final:{a.pk}").exists()


def test_checksum_is_sha256_over_the_canonical_lines(month_of_use, clock):
    statement = services.finalise_statement(statement=draft(month_of_use), by=month_of_use.manager)
    # Recompute by hand from the stored values (FIPS 180-4 SHA-256 via hashlib).
    from facility.billing.checksum import LINE_FIELDS, VERSION

    sep = "\x1f"

    def text(v):
        if v is None:
            return ""
        if isinstance(v, dt.datetime):
            return v.astimezone(dt.UTC).isoformat()
        return format(v, "f") if isinstance(v, Decimal) else str(v)

    rows = [
        sep.join([VERSION, str(statement.account_id), "KES-01", "2027-03-01", "1", "EUR", "440.00"])
    ]
    for line in statement.lines.order_by("position").values(*LINE_FIELDS):
        rows.append(sep.join(text(line[k]) for k in LINE_FIELDS))
    assert statement.checksum == hashlib.sha256("\n".join(rows).encode()).hexdigest()


def test_a_changed_line_no_longer_matches_the_checksum(month_of_use, clock):
    statement = services.finalise_statement(statement=draft(month_of_use), by=month_of_use.manager)
    with connection.cursor() as cursor:
        if connection.vendor == "postgresql":
            # Tamper past the trigger (inside this test's transaction, rolled back after);
            # deferred foreign-key checks must fire first or PostgreSQL refuses the ALTER.
            cursor.execute("SET CONSTRAINTS ALL IMMEDIATE")
            cursor.execute(
                "ALTER TABLE billing_charge DISABLE TRIGGER billing_charge_final_immutable"
            )
        cursor.execute(
            "UPDATE billing_charge SET amount = 1.00 WHERE statement_id = %s AND position = 1",
            [statement.pk],
        )
    assert not queries.checksum_matches(statement)


def test_finalising_refuses_before_the_month_is_over(month_of_use, clock):
    clock.move_to(at(31, 23, 59))
    with pytest.raises(Conflict, match="not over yet; finalise from 01 April 2027"):
        services.finalise_statement(statement=draft(month_of_use), by=month_of_use.manager)


def test_only_staff_finalise_and_draft(month_of_use, clock):
    statement = draft(month_of_use)
    with pytest.raises(NotAllowed, match="Only facility staff"):
        services.finalise_statement(statement=statement, by=month_of_use.leader_a)
    with pytest.raises(NotAllowed):
        services.draft_statement(
            account=month_of_use.account_a, month=MARCH, by=month_of_use.researcher_a
        )
    assert Statement.objects.get(pk=statement.pk).state == StatementState.DRAFT


def test_the_reviewed_checksum_must_still_hold(month_of_use, clock):
    fac = month_of_use
    statement = draft(fac)
    reviewed = queries.checksum_of(statement)
    log_session(fac, at(8, 9), at(8, 10))  # logged after the review
    with pytest.raises(Conflict, match="changed since it was reviewed"):
        services.finalise_statement(statement=statement, by=fac.manager, expected_checksum=reviewed)
    fresh = queries.checksum_of(draft(fac))
    final = services.finalise_statement(
        statement=statement, by=fac.manager, expected_checksum=fresh
    )
    assert final.number == 1


def test_refused_finalisation_takes_no_number(month_of_use, clock):
    fac = month_of_use
    services.draft_month(month=MARCH)
    a = Statement.objects.get(account=fac.account_a)
    b = Statement.objects.get(account=fac.account_b)
    log_session(fac, at(9, 9), None, account=fac.account_a)  # an open session blocks A
    with pytest.raises(Conflict):
        services.finalise_statement(statement=a, by=fac.manager)
    assert services.finalise_statement(statement=b, by=fac.manager).number == 1  # no gap


def test_a_finalised_statement_is_not_redrafted(month_of_use, clock):
    fac = month_of_use
    final = services.finalise_statement(statement=draft(fac), by=fac.manager)
    with pytest.raises(Closed, match="is final"):
        draft(fac)
    run = services.draft_month(month=MARCH)
    assert run.skipped_final == ["KES-01"]
    assert Statement.objects.get(pk=final.pk).total == Decimal("440.00")


def test_a_late_logbook_entry_goes_on_the_next_statement(month_of_use, clock):
    fac = month_of_use
    services.finalise_statement(statement=draft(fac), by=fac.manager)
    late = log_session(fac, at(10, 9), at(10, 10))  # a March session typed in on 2 April
    april = draft(fac, month=APRIL)
    line = april.lines.get()
    assert line.session_id == late.pk
    assert line.description.startswith("Logged after 2027-03 was final")
    assert line.amount == Decimal("80.00")
    assert april.total == Decimal("80.00")


def test_moving_a_session_to_another_account_moves_its_line(month_of_use, clock):
    fac = month_of_use
    services.draft_month(month=MARCH)
    moved = fac.account_a.sessions.get(started_at=at(2, 9))
    moved.account = fac.account_b
    moved.save()
    services.draft_statement(account=fac.account_b, month=MARCH, by=fac.manager)
    a = Statement.objects.get(account=fac.account_a)
    b = Statement.objects.get(account=fac.account_b)
    assert Charge.objects.filter(session=moved).get().statement == b
    assert a.total == Decimal("280.00")  # 440.00 − 160.00, refreshed when the line left
    assert b.total == Decimal("240.00")  # 80.00 + 160.00


def test_adjustment_corrects_a_final_statement_on_the_next_one(month_of_use, clock):
    fac = month_of_use
    final = services.finalise_statement(statement=draft(fac), by=fac.manager)
    credit = services.add_adjustment(
        account=fac.account_a,
        amount="-40.00",
        reason="Detector fault cost half of the session on 3 March",
        by=fac.manager,
        corrects=final,
    )
    april = credit.statement
    assert april.month == APRIL and april.state == StatementState.DRAFT
    assert credit.created_by == fac.manager and credit.corrects == final
    assert "Correction to statement S-000001" in credit.description
    assert april.total == Decimal("-40.00")
    # Redrafting April keeps the adjustment and adds April's use after it is logged.
    log_session(fac, at(6, 9, month=4), at(6, 10, month=4))
    april = draft(fac, month=APRIL)
    assert [line.kind for line in april.lines.order_by("position")] == [
        ChargeKind.USE,
        ChargeKind.ADJUSTMENT,
    ]
    assert april.total == Decimal("40.00")  # 80.00 − 40.00
    assert Statement.objects.get(pk=final.pk).total == Decimal("440.00")  # untouched


@pytest.mark.parametrize(
    ("amount", "reason", "fragment"),
    [
        (12.5, "float", "not a float"),
        ("12.505", "three places", "more than two decimal places"),
        ("0.00", "nothing", "changes nothing"),
        ("abc", "text", "not a number"),
        ("10.00", "   ", "needs a reason"),
    ],
)
def test_adjustment_refusals(facility, amount, reason, fragment):
    with pytest.raises(Invalid, match=fragment):
        services.add_adjustment(
            account=facility.account_a,
            amount=amount,
            reason=reason,
            by=facility.manager,
            month=MARCH,
        )
    assert not Charge.objects.exists()


def test_adjustments_need_staff_and_a_later_month(month_of_use, clock):
    fac = month_of_use
    final = services.finalise_statement(statement=draft(fac), by=fac.manager)
    with pytest.raises(NotAllowed):
        services.add_adjustment(
            account=fac.account_a, amount="5.00", reason="x", by=fac.leader_a, month=APRIL
        )
    with pytest.raises(Closed, match="is final"):
        services.add_adjustment(
            account=fac.account_a, amount="5.00", reason="x", by=fac.manager, month=MARCH
        )
    with pytest.raises(Invalid, match="later month"):
        services.add_adjustment(
            account=fac.account_a,
            amount="5.00",
            reason="x",
            by=fac.manager,
            corrects=final,
            month=MARCH,
        )


def test_remove_adjustment_only_from_drafts(facility, clock):
    add_tariff(facility)
    log_session(facility, at(2, 9), at(2, 10))
    draft(facility)
    line = services.add_adjustment(
        account=facility.account_a,
        amount="5.00",
        reason="Sample prep",
        by=facility.manager,
        month=MARCH,
    )
    services.remove_adjustment(line=line, by=facility.manager)
    statement = Statement.objects.get()
    assert statement.total == Decimal("80.00")
    priced = statement.lines.get()
    with pytest.raises(Invalid, match="Only adjustment lines"):
        services.remove_adjustment(line=priced, by=facility.manager)


def test_empty_draft_is_removed(facility):
    add_tariff(facility)
    session = log_session(facility, at(2, 9), at(2, 10))
    assert draft(facility) is not None
    session.account = f.AccountFactory(code="KES-02", group=facility.group_a)
    session.save()
    assert draft(facility) is None
    assert not Statement.objects.filter(account=facility.account_a).exists()


def test_mixed_currencies_are_a_problem(facility):
    add_tariff(facility)
    add_tariff(facility, purpose="training", currency="CHF")
    log_session(facility, at(2, 9), at(2, 10))
    log_session(facility, at(2, 11), at(2, 12), purpose="training")
    statement = draft(facility)
    assert statement.currency == ""
    assert "more than one currency (CHF, EUR)" in statement.problems[-1]


def test_statement_visibility(month_of_use, clock):
    fac = month_of_use
    services.draft_month(month=MARCH)
    assert queries.visible_to(fac.manager).count() == 2
    assert [s.account.code for s in queries.visible_to(fac.leader_a)] == ["KES-01"]
    assert not queries.visible_to(fac.researcher_a).exists()
    own = queries.lines_visible_to(fac.researcher_b)
    assert {line.user_id for line in own} == {fac.researcher_b.pk}
    finance = f.UserFactory(username="fin.office", profile__role="finance")
    assert queries.visible_to(finance).count() == 2
