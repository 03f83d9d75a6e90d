"""The daily check: staff are alerted once per threshold crossing, by e-mail and in the app."""

from __future__ import annotations

import datetime as dt

import pytest
from django.core import mail

from facility.people.models import Notification
from facility.upkeep import queries, services, tasks
from facility.upkeep.models import Alert, AlertLevel, Counter, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import T0, add_session, at

WEEK = dt.timedelta(weeks=1)


@pytest.fixture
def rated_lab6(facility, lab6):
    services.set_limit(
        instrument=lab6,
        counter=Counter.EMITTER_HOURS,
        rated=100,
        warn_percent=80,
        by=facility.manager,
    )
    return lab6


def _levels() -> list[str]:
    return sorted(Alert.objects.values_list("level", flat=True))


def test_warn_crossing_alerts_once(facility, clock, rated_lab6):
    add_session(facility, rated_lab6, at(1, 8), 9, beam=45)
    add_session(facility, rated_lab6, at(2, 8), 9, beam=40)
    # 45 + 40 = 85 h of 100: past the 80 % warn level. (No forecast window here: with
    # within_days=0 only thresholds already past alert.)
    first = services.check_limits(within_days=0)
    second = services.check_limits(within_days=0)
    assert [a.level for a in first] == [AlertLevel.WARN] and second == []
    assert Alert.objects.count() == 1
    note = Notification.objects.get(user=facility.manager)
    assert "85 h of 100 (85%)" in note.subject and "warn level" in note.subject
    assert note.topic == first[0].topic
    assert len(mail.outbox) == 1 and mail.outbox[0].to == [facility.manager.email]
    # Researchers are not staff and get nothing.
    assert not Notification.objects.filter(user=facility.researcher_a).exists()
    assert list(queries.open_alerts()) == first


def test_limit_crossing_is_a_new_alert_and_a_reset_starts_again(facility, clock, rated_lab6):
    add_session(facility, rated_lab6, at(1, 8), 9, beam=85)
    services.check_limits(within_days=0)
    add_session(facility, rated_lab6, at(3, 8), 9, beam=20)
    # 85 + 20 = 105 h: past the rating — one more alert, then nothing on the next runs.
    assert [a.level for a in services.check_limits(within_days=0)] == [AlertLevel.LIMIT]
    assert services.check_limits(within_days=0) == []
    assert _levels() == ["limit", "warn"] and len(mail.outbox) == 2

    services.record_service_event(
        instrument=rated_lab6,
        kind=ServiceKind.EMITTER_CHANGE,
        performed_at=at(4),
        by=facility.manager,
    )
    # The change closes both alerts; the new emitter starts at 0 and alerts nothing.
    assert not queries.open_alerts().exists()
    assert services.check_limits(within_days=0) == []
    add_session(facility, rated_lab6, at(5, 8), 9, beam=81)
    # 81 h on the new emitter: its own warn crossing, alerted again.
    again = services.check_limits(within_days=0)
    assert [a.level for a in again] == [AlertLevel.WARN]
    assert again[0].topic != Alert.objects.filter(level="warn").exclude(pk=again[0].pk).get().topic


def test_crossing_two_thresholds_at_once_sends_one_message(facility, clock, rated_lab6):
    add_session(facility, rated_lab6, at(1, 8), 9, beam=101)
    raised = services.check_limits(within_days=0)
    # 101 h of 100: both the warn level and the rating are past; one message, about the rating.
    assert sorted(a.level for a in raised) == ["limit", "warn"]
    note = Notification.objects.get(user=facility.manager)
    assert "past its rated life" in note.subject
    assert len(mail.outbox) == 1


def test_forecast_within_the_window_alerts_once(facility, rated_lab6):
    services.set_limit(
        instrument=rated_lab6, counter=Counter.EMITTER_HOURS, rated=200, by=facility.manager
    )
    for k in range(12):
        add_session(facility, rated_lab6, T0 + k * WEEK, 10)
    now = T0 + 12 * WEEK
    # 120 of 200 h (60 %) at 10 h/week: the limit in exactly 8 weeks = 56 days.
    assert services.check_limits(now=now, within_days=55) == []
    raised = services.check_limits(now=now, within_days=56)
    assert [a.level for a in raised] == [AlertLevel.FORECAST]
    assert raised[0].forecast_on == (now + 8 * WEEK).date()
    assert services.check_limits(now=now + dt.timedelta(days=1), within_days=56) == []


def test_a_new_rating_is_a_new_threshold(facility, clock, rated_lab6):
    add_session(facility, rated_lab6, at(1, 8), 9, beam=85)
    services.check_limits(within_days=0)
    # Staff lower the rating to 90 h: 85 h is past its 80 % (72 h) — a different crossing.
    services.set_limit(
        instrument=rated_lab6, counter=Counter.EMITTER_HOURS, rated=90, by=facility.manager
    )
    assert [a.level for a in services.check_limits(within_days=0)] == [AlertLevel.WARN]
    assert Alert.objects.count() == 2


def test_the_beat_task_is_idempotent(facility, clock, rated_lab6, settings):
    # The task reads the window from settings; 0 days leaves only the warn crossing of 90 h.
    settings.UPKEEP_FORECAST_ALERT_DAYS = 0
    add_session(facility, rated_lab6, at(1, 8), 9, beam=90)
    f.UserFactory(username="sam.staff", is_staff=True)
    assert tasks.check_limits.delay().get() == 1
    assert tasks.check_limits.delay().get() == 0
    # Both staff members told once each, in the app and by e-mail.
    assert Notification.objects.count() == 2 and len(mail.outbox) == 2


def test_unrated_counters_never_alert(facility, clock):
    pump = f.PumpFactory(instrument=facility.sem, name="scroll", kind="scroll")
    add_session(facility, facility.sem, at(1, 8), 9)
    status = queries.counter_status(queries.spec_for(facility.sem, Counter.PUMP_HOURS, pump=pump))
    assert status.state == "unrated" and status.forecast is None
    assert services.check_limits(within_days=365) == []
