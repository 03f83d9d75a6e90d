"""`load_demo` builds a plausible facility that obeys the facility's rules, and is safe to run twice.

Time is frozen at a fixed afternoon in a zone with a daylight-saving change inside the demo's
three months, so the checks are repeatable and the change of offset is exercised.
"""

from __future__ import annotations

import datetime as dt
import itertools
from collections import defaultdict
from io import StringIO
from zoneinfo import ZoneInfo

import pytest
import time_machine
from django.apps import apps
from django.contrib.auth import authenticate, get_user_model
from django.core.management import CommandError, call_command
from django.utils import timezone

from facility.bookings.models import LIVE_STATES, Booking, BookingState
from facility.demo import catalogue as cat
from facility.demo.plan import CANCELLED, DONE, LATE_CANCELLED, NO_SHOW, Planner
from facility.instruments.models import TrainingLevel, TrainingRecord
from facility.logbook.models import Coating, Conditions, InstrumentSession, Specimen
from facility.people.models import AccountKind, Group

pytestmark = pytest.mark.django_db

ZONE = "Europe/Vienna"
# Europe/Vienna leaves summer time on 25 Oct 2026, inside the three months before this moment.
NOW = dt.datetime(2026, 11, 4, 15, 37, tzinfo=ZoneInfo(ZONE))

COUNTED = [
    "people.Group",
    "people.Membership",
    "people.Account",
    "people.Profile",
    "instruments.Instrument",
    "instruments.Pump",
    "instruments.TrainingRecord",
    "bookings.Booking",
    "bookings.HistoricalBooking",
    "logbook.Specimen",
    "logbook.Coating",
    "logbook.InstrumentSession",
    "billing.Tariff",
    "billing.Statement",
    "billing.Charge",
    "logbook.HistoricalInstrumentSession",
    "logbook.Conditions",
    "logbook.HistoricalConditions",
    "auth.User",
]


@pytest.fixture(autouse=True)
def frozen(settings):
    settings.TIME_ZONE = ZONE
    settings.DEBUG = True  # as under `make demo`; the command refuses to run with DEBUG off
    with time_machine.travel(NOW, tick=False):
        yield


def _load(*args: str) -> str:
    # Generated micrographs are tested once, below: they are the slow part of a load.
    if "--image-sessions" not in args and "--print-password" not in args:
        args = (*args, "--image-sessions", "0")
    out = StringIO()
    call_command("load_demo", *args, stdout=out)
    return out.getvalue()


def _counts() -> dict[str, int]:
    return {label: apps.get_model(label).objects.count() for label in COUNTED}


def test_refuses_with_debug_off_unless_forced(settings):
    settings.DEBUG = False
    with pytest.raises(CommandError, match="DEBUG"):
        _load()
    assert not Booking.objects.exists()

    _load("--force", "--days", "2")
    assert Booking.objects.exists()


def test_second_run_adds_nothing_and_reset_reloads_the_same_facility():
    # Two weeks of history are enough here and keep the test quick (loading is the slow part;
    # the three-month span is checked on the plan alone, below).
    _load("--days", "14")
    first = _counts()
    assert all(n > 0 for n in first.values()), first
    old_ids = set(Booking.objects.values_list("id", flat=True))

    again = _load("--days", "14")

    assert "already loaded" in again
    assert _counts() == first

    _load("--reset", "--days", "14")

    # Same seed, same moment: the same facility, made of new rows (the old ones and their
    # history are gone, so nothing is counted twice).
    assert _counts() == first
    assert old_ids.isdisjoint(Booking.objects.values_list("id", flat=True))


def test_default_plan_covers_about_three_months_ending_today_and_a_few_future_bookings():
    # The plan alone (no database): the full three months cost too much to load in every run.
    now = timezone.now()
    today = timezone.localdate(now)
    slots = Planner(today=today, now=now, tz=timezone.get_current_timezone()).plan()
    past = [s for s in slots if s.ends_at <= now]
    future = [s for s in slots if s.starts_at > now]
    assert len(past) + len(future) == len(slots)  # nothing under way is planned
    first_day = min(timezone.localdate(s.starts_at) for s in past)
    assert today - dt.timedelta(days=91) <= first_day <= today - dt.timedelta(days=85)
    assert max(timezone.localdate(s.starts_at) for s in past) == today
    assert 3 <= len(future) <= 40
    assert {s.outcome for s in past} == {DONE, CANCELLED, LATE_CANCELLED, NO_SHOW}


def test_demo_obeys_the_rules_covers_the_cases_and_its_logins_work():
    # Five weeks reach back past the change of offset on 25 Oct and past the day an account and
    # a training record of the demo expired.
    output = _load("--days", "35")
    assert "Loading the demo facility" in output
    now = timezone.now()
    today = timezone.localdate(now)

    sessions = list(InstrumentSession.objects.select_related("instrument"))
    first_day = min(timezone.localdate(s.started_at) for s in sessions)
    assert first_day <= dt.date(2026, 10, 24)
    assert max(timezone.localdate(s.started_at) for s in sessions) == today
    assert Booking.objects.filter(starts_at__gt=now).exists()

    # Every closed session lies in the past, and the beam was on no longer than the session
    # lasted (common practice, no source: beam-on time is a part of the session's time).
    for session in sessions:
        assert session.ended_at is not None and session.ended_at <= now
        assert 0 <= float(session.beam_on_hours) <= session.hours + 1e-9, session

    # No two live bookings of one instrument share an instant (half-open ranges, issue 2), and
    # no two sessions either (one operator at the microscope at a time; common practice).
    for rows in (
        Booking.objects.filter(state__in=LIVE_STATES).values_list(
            "instrument_id", "starts_at", "ends_at"
        ),
        InstrumentSession.objects.values_list("instrument_id", "started_at", "ended_at"),
    ):
        by_instrument = defaultdict(list)
        for instrument_id, start, end in rows:
            by_instrument[instrument_id].append((start, end))
        for ranges in by_instrument.values():
            ranges.sort()
            for (_, end), (start, _) in itertools.pairwise(ranges):
                assert end <= start

    # Cancellations fall on the right side of each instrument's deadline (issue 2's rule).
    for booking in Booking.objects.filter(
        state__in=[BookingState.CANCELLED, BookingState.LATE_CANCELLED]
    ).select_related("instrument"):
        deadline = booking.starts_at - dt.timedelta(
            hours=booking.instrument.cancellation_deadline_hours
        )
        late = booking.cancelled_at > deadline
        assert late == (booking.state == BookingState.LATE_CANCELLED)

    states = set(Booking.objects.values_list("state", flat=True))
    assert {"cancelled", "late_cancelled", "no_show", "done", "confirmed"} <= states
    assert {1, 2, 3} <= set(TrainingRecord.objects.values_list("level", flat=True))
    assert TrainingRecord.objects.filter(expires_on__lt=today).exists()
    assert set(AccountKind.values) <= set(
        apps.get_model("people.Account").objects.values_list("kind", flat=True)
    )
    assert Group.objects.filter(shares_details=False).count() == 1
    forms = set(Specimen.objects.values_list("form", flat=True))
    assert {"powder", "fibre", "hydrogel", "particles_on_film", "bulk"} <= forms
    assert InstrumentSession.objects.filter(vacuum_mode="low").exists()

    # Out-of-hours sessions only by people holding the out-of-hours level (issue 2).
    for session in InstrumentSession.objects.filter(booking__isnull=False).select_related(
        "booking", "instrument", "operator"
    ):
        start = timezone.localtime(session.booking.starts_at)
        in_hours = (
            start.isoweekday() <= 5
            and timezone.localtime(session.booking.ends_at).time()
            <= session.instrument.bookable_until
        )
        if not in_hours and not session.operator.is_staff:
            record = TrainingRecord.objects.get(
                user=session.operator, instrument=session.instrument
            )
            assert record.level == TrainingLevel.OUT_OF_HOURS

    # Sputtered metal films 1–10 nm, evaporated carbon 10–20 nm (DOMAIN.md, trade practice).
    for material, thickness in Coating.objects.exclude(material="none").values_list(
        "material", "thickness_nm"
    ):
        low, high = (10, 20) if material == "C" else (1, 10)
        assert low <= thickness <= high, (material, thickness)
    # SEM voltages up to 30 kV; low-vacuum pressure roughly 10–150 Pa (DOMAIN.md).
    for kv, mode, pressure in Conditions.objects.values_list(
        "accelerating_voltage_kv", "vacuum_mode", "chamber_pressure_pa"
    ):
        assert 0.1 <= kv <= 30
        if mode == "low":
            assert 10 <= pressure <= 150

    # Every change in the history names who made it.
    assert not Booking.history.filter(history_user__isnull=True).exists()

    # The logins `make demo` prints work with the printed password (one load serves both checks,
    # as loading is the slow part).
    password = _load("--print-password").strip()
    lines = _load("--list-logins").strip().splitlines()
    assert len(lines) == len(cat.USERS)
    staff = 0
    for line in lines:
        username = line.split()[0]
        user = authenticate(username=username, password=password)
        assert user is not None, username
        staff += user.is_staff
        if user.is_staff:
            assert user.is_superuser  # so the admin works for the demo manager
    assert staff == 1
    assert get_user_model().objects.filter(
        username__in=[u.username for u in cat.USERS]
    ).count() == len(lines)


def test_demo_images_go_through_the_real_pipeline(django_capture_on_commit_callbacks):
    from facility.logbook.models import Flag, Micrograph

    with django_capture_on_commit_callbacks(execute=True):
        output = _load("--days", "14", "--image-sessions", "4")
    assert "micrographs:" in output
    micrographs = Micrograph.objects.all()
    assert micrographs.count() == 8
    assert set(micrographs.values_list("state", flat=True)) == {"done"}
    assert all(m.thumbnail and m.assessments.exists() for m in micrographs)
    # Each image's session has had its flags recomputed from its images: a charging image makes
    # a charging flag, with remedies.
    charged = [m for m in micrographs if "charging" in m.assessments.get().flags]
    for m in charged:
        flag = Flag.objects.get(session=m.session, code="charging")
        assert flag.remedies
