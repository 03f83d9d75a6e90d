"""Load the invented demo facility, replaying its past through the services.

People, groups, accounts, instruments, pumps and training records have no services yet and are
created directly. Everything that happened over time — bookings, cancellations, no-shows,
check-ins, specimens, coatings, conditions, check-outs — goes through bookings.services and
logbook.services with `now=` set to when it happened, so the demo obeys the same rules as real use.
"""

from __future__ import annotations

import datetime as dt
import math
import time
from collections import Counter
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from types import SimpleNamespace

from django.contrib.auth import get_user_model
from django.db import transaction
from django.utils import timezone
from simple_history.models import HistoricalRecords

from facility.bookings import services as bookings
from facility.bookings.models import Booking, Purpose
from facility.demo import billing_data
from facility.demo import catalogue as cat
from facility.demo import plan as p
from facility.demo.entries import EntryWriter
from facility.demo.images import add_images
from facility.demo.setup import Directory, create_equipment, create_people
from facility.instruments.models import Instrument, InstrumentKind
from facility.logbook import services as logbook
from facility.logbook.models import InstrumentSession
from facility.people.models import Group

Progress = Callable[[str], None]


@contextmanager
def acting_as(user) -> Iterator[None]:
    """Attribute change-history rows to `user`, as the request middleware does for web requests."""
    HistoricalRecords.context.request = SimpleNamespace(user=user)
    try:
        yield
    finally:
        del HistoricalRecords.context.request


def is_loaded() -> bool:
    """Whether any part of the demo is in the database (its instruments, groups or logins)."""
    User = get_user_model()
    return (
        Instrument.objects.filter(code__in=[i.code for i in cat.INSTRUMENTS]).exists()
        or Group.objects.filter(name__in=[g.name for g in cat.GROUPS]).exists()
        or User.objects.filter(username__in=[u.username for u in cat.USERS]).exists()
    )


def login_lines() -> list[str]:
    """One line per demo login: username, role, group."""
    groups = {g.key: g.name for g in cat.GROUPS}
    return [
        f"{u.username:<17} {u.title:<33} {groups.get(u.group, '(no group)')}" for u in cat.USERS
    ]


def _minute(moment: dt.datetime) -> dt.datetime:
    return moment.replace(second=0, microsecond=0)


class Builder:
    """Replays the planned timeline through the booking and logbook services."""

    def __init__(self, *, now: dt.datetime, history_days: int, progress: Progress) -> None:
        self.now = now
        self.history_days = history_days
        self.tz = timezone.get_current_timezone()
        self.today = timezone.localdate(now)
        self.progress = progress
        self.rows = Directory()
        self.last_end: dict[str, dt.datetime] = {}
        self.outcomes: Counter[str] = Counter()

    @property
    def users(self) -> dict[str, object]:
        return self.rows.users

    @property
    def instruments(self) -> dict[str, Instrument]:
        return self.rows.instruments

    def setup(self) -> None:
        create_people(self.rows, self.today)
        self.progress(
            f"  people: {len(self.rows.users)} logins in {len(self.rows.groups)} groups, "
            f"{len(self.rows.accounts)} accounts"
        )
        create_equipment(self.rows, self.today)
        self.progress(
            f"  instruments: {len(self.rows.instruments)} with {self.rows.pumps} pumps; "
            f"{len(cat.TRAINING)} training records"
        )
        self.entries = EntryWriter({g.pk: key for key, g in self.rows.groups.items()})

    # --- The timeline, through the services ------------------------------------------------

    def timeline(self) -> None:
        slots = p.Planner(
            today=self.today, now=self.now, tz=self.tz, history_days=self.history_days
        ).plan()
        past = [s for s in slots if s.outcome not in (p.FUTURE, p.FUTURE_CANCELLED)]
        future = [s for s in slots if s.outcome in (p.FUTURE, p.FUTURE_CANCELLED)]
        week = None
        for slot in past:
            this_week = timezone.localtime(slot.starts_at).isocalendar()[:2]
            if week is not None and this_week != week and this_week[1] % 3 == 0:
                self.progress(
                    f"  to {timezone.localdate(slot.starts_at)}: {sum(self.outcomes.values())} "
                    "bookings and walk-ups replayed"
                )
            week = this_week
            self.replay(slot)
        for slot in future:
            self.replay_future(slot)
        self.progress(f"  {len(future)} future bookings")

    def replay(self, slot: p.Slot) -> None:
        self.outcomes[slot.outcome if slot.kind != p.WALK_UP else "walk_up"] += 1
        if slot.kind == p.WALK_UP:
            self.walk_up(slot)
            return
        rng = slot.rng
        instrument = self.instruments[slot.instrument]
        user = self.users[slot.user]
        staff = self.users[cat.STAFF]
        booker = staff if slot.purpose == Purpose.TRAINING else user
        created = _minute(slot.starts_at - dt.timedelta(minutes=rng.randint(6 * 60, 12 * 24 * 60)))
        deadline = dt.timedelta(hours=instrument.cancellation_deadline_hours)
        cancel_at = None
        if slot.outcome == p.CANCELLED:
            cancel_at = slot.starts_at - deadline - dt.timedelta(minutes=rng.randint(120, 72 * 60))
        elif slot.outcome == p.LATE_CANCELLED:
            cancel_at = slot.starts_at - deadline * rng.uniform(0.1, 0.9)
        if cancel_at is not None:
            cancel_at = _minute(cancel_at)
            created = min(created, cancel_at - dt.timedelta(hours=2))
        booking = self.book(slot, booker, created)
        if cancel_at is not None:
            with acting_as(user):
                bookings.cancel(booking=booking, by=user, now=cancel_at)
        elif slot.outcome == p.NO_SHOW:
            grace = min(dt.timedelta(minutes=40), (slot.ends_at - slot.starts_at) / 2)
            with acting_as(staff):
                bookings.mark_no_show(booking=booking, by=staff, now=slot.starts_at + grace)
        else:
            self.session(slot, booking)

    def replay_future(self, slot: p.Slot) -> None:
        self.outcomes[slot.outcome] += 1
        rng = slot.rng
        user = self.users[slot.user]
        booker = self.users[cat.STAFF] if slot.purpose == Purpose.TRAINING else user
        created = _minute(self.now - dt.timedelta(minutes=rng.randint(60, 5 * 24 * 60)))
        booking = self.book(slot, booker, created)
        if slot.outcome == p.FUTURE_CANCELLED:
            cancel_at = created + (self.now - created) * rng.uniform(0.3, 0.9)
            with acting_as(user):
                bookings.cancel(booking=booking, by=user, now=cancel_at)

    def book(self, slot: p.Slot, by, created: dt.datetime) -> Booking:
        note = ""
        if slot.purpose in cat.NOTES:
            note = slot.rng.choice(cat.NOTES[slot.purpose])
        with acting_as(by):
            return bookings.book(
                user=self.users[slot.user],
                instrument=self.instruments[slot.instrument],
                account=self.rows.accounts[slot.account],
                starts_at=slot.starts_at,
                ends_at=slot.ends_at,
                purpose=slot.purpose,
                note=note,
                by=by,
                now=created,
            )

    def walk_up(self, slot: p.Slot) -> None:
        user = self.users[slot.user]
        instrument = self.instruments[slot.instrument]
        with acting_as(user):
            session = logbook.check_in(
                user=user,
                instrument=instrument,
                account=self.rows.accounts[slot.account],
                purpose=Purpose.OWN_USE,
                now=slot.starts_at,
            )
        self.log_and_close(slot, session, user, slot.ends_at - dt.timedelta(minutes=5))

    def session(self, slot: p.Slot, booking: Booking) -> None:
        rng = slot.rng
        user = self.users[slot.user]
        staff = self.users[cat.STAFF]
        checker = staff if slot.purpose == Purpose.TRAINING else user
        arrive = slot.starts_at + dt.timedelta(minutes=rng.randint(-10, 12))
        previous = self.last_end.get(slot.instrument)
        if previous is not None:
            arrive = max(arrive, previous + dt.timedelta(minutes=2))
        with acting_as(checker):
            session = logbook.check_in(
                user=user,
                instrument=self.instruments[slot.instrument],
                booking=booking,
                by=checker,
                now=arrive,
            )
        if self.instruments[slot.instrument].kind == InstrumentKind.COATER:
            leave = arrive + dt.timedelta(minutes=rng.randint(12, 28))
        else:
            leave = slot.ends_at - dt.timedelta(minutes=rng.randint(0, 30))
        leave = min(max(leave, arrive + dt.timedelta(minutes=15)), slot.ends_at)
        self.log_and_close(slot, session, user, leave)

    def log_and_close(
        self, slot: p.Slot, session: InstrumentSession, operator, leave: dt.datetime
    ) -> None:
        rng = slot.rng
        staff = self.users[cat.STAFF]
        instrument = self.instruments[slot.instrument]
        coater = instrument.kind == InstrumentKind.COATER
        with acting_as(operator):
            self.entries.write(slot, session, operator, coater=coater)
        minutes = (leave - session.started_at).total_seconds() / 60
        if coater:
            beam = 0.0  # a coater has no electron beam; its sputter time is not beam time
            vents = rng.choice((1, 1, 2))
        else:
            share = (
                rng.uniform(0.3, 0.7)
                if slot.purpose == Purpose.SERVICE
                else rng.uniform(0.55, 0.92)
            )
            beam = math.floor(minutes / 60 * share * 100) / 100
            vents = (
                2
                if slot.purpose == Purpose.SERVICE
                else 1 + (rng.random() < 0.35) + (rng.random() < 0.1)
            )
        staff_minutes = None
        closer = operator
        if slot.purpose == Purpose.ASSISTED:
            staff_minutes, closer = int(minutes * rng.uniform(0.4, 1.0)), staff
        elif slot.purpose == Purpose.TRAINING:
            staff_minutes, closer = int(minutes), staff
        with acting_as(closer):
            logbook.check_out(
                session=session,
                by=closer,
                now=leave,
                beam_on_hours=beam,
                vent_cycles=vents,
                staff_minutes=staff_minutes,
            )
        self.last_end[slot.instrument] = leave


def load(
    *,
    now: dt.datetime | None = None,
    history_days: int = cat.HISTORY_DAYS,
    image_sessions: int = 12,
    progress: Progress = lambda message: None,
) -> Counter:
    """Create the whole demo facility in one transaction; returns what the timeline produced.

    `history_days` is how far back the bookings and sessions go (about three months by default).
    """
    started = time.perf_counter()
    builder = Builder(now=now or timezone.now(), history_days=history_days, progress=progress)
    progress(f"Loading the demo facility: {cat.FACILITY}")
    with transaction.atomic():
        builder.setup()
        staff = builder.users[cat.STAFF]
        first_day = timezone.localdate(builder.now) - dt.timedelta(days=history_days + 1)
        with acting_as(staff):
            tariffs = billing_data.add_tariffs(by=staff, valid_from=first_day)
        progress(f"  tariffs: {tariffs} (invented rates)")
        builder.timeline()
        with acting_as(staff):
            statements = billing_data.draft_past_months(
                by=staff, first_day=first_day, now=builder.now
            )
        progress(f"  statements: {statements['drafted']} drafted (finalise them on the page)")
        if image_sessions:
            with acting_as(builder.users[cat.STAFF]):
                made = add_images(by=builder.users[cat.STAFF], sessions=image_sessions)
            progress(
                "  micrographs: "
                + ", ".join(f"{n} {kind}" for kind, n in sorted(made.items()))
                + " (analysed when the load commits)"
            )
    progress(f"  done in {time.perf_counter() - started:.1f} s")
    return builder.outcomes
