"""Plan the demo timeline: which slots were booked, by whom, on which account, and how they ended.

Pure Python, no database: the plan is drawn from random generators seeded per instrument, day and
slot, so the same load day always gives the same facility. The builder then replays the plan
through the services, which check every rule again.
"""

from __future__ import annotations

import datetime as dt
import random
from dataclasses import dataclass

from facility.bookings.models import Purpose
from facility.demo import catalogue as cat
from facility.instruments.models import InstrumentKind, TrainingLevel

# Outcomes of a planned slot.
DONE = "done"
CANCELLED = "cancelled"
LATE_CANCELLED = "late_cancelled"
NO_SHOW = "no_show"
FUTURE = "future"
FUTURE_CANCELLED = "future_cancelled"

BOOKING, WALK_UP, SERVICE = "booking", "walk_up", "service"


@dataclass
class Slot:
    instrument: str
    starts_at: dt.datetime
    ends_at: dt.datetime
    kind: str
    out_of_hours: bool
    rng: random.Random
    user: str = ""
    purpose: str = Purpose.OWN_USE
    account: str = ""
    outcome: str = DONE


def _minutes(t: dt.time) -> int:
    return t.hour * 60 + t.minute


def _at(day: dt.date, minutes: int, tz: dt.tzinfo) -> dt.datetime:
    return dt.datetime.combine(day, dt.time(minutes // 60, minutes % 60), tzinfo=tz)


def _day_times(
    spec: cat.InstrumentSpec, day: dt.date, rng: random.Random
) -> list[tuple[int, int, str, bool]]:
    """(start minute, end minute, kind, out of hours) for one instrument on one day."""
    opens, closes = _minutes(spec.bookable_from), _minutes(spec.bookable_until)
    weekday = day.isoweekday()
    times: list[tuple[int, int, str, bool]] = []
    if weekday <= 5:
        cursor = opens + rng.choice((0, 0, 30, 60))
        if spec.monthly_service and weekday == spec.service_weekday and day.day <= 7:
            times.append((opens, opens + 120, SERVICE, False))
            cursor = opens + 120 + rng.choice(spec.gaps)
        while True:
            length = rng.choice(spec.durations)
            if cursor + length > closes:
                break
            if rng.random() < spec.take:
                times.append((cursor, cursor + length, BOOKING, False))
                cursor += length + rng.choice(spec.gaps)
            elif spec.walk_up and rng.random() < spec.walk_up:
                length = rng.choice((30, 45, 60))
                if cursor + length <= closes:
                    times.append((cursor, cursor + length, WALK_UP, False))
                cursor += length + 30
            else:
                cursor += 60
        if spec.evening and rng.random() < spec.evening:
            times.append((closes, closes + 180, BOOKING, True))
    elif weekday == 6 and spec.saturday and rng.random() < spec.saturday:
        times.append((10 * 60, 14 * 60, BOOKING, True))
    return times


@dataclass(frozen=True)
class _Training:
    level: int
    first: dt.date
    last: dt.date | None


class Planner:
    """Draws the slots of every day and assigns each to a person who could really have booked it."""

    def __init__(
        self,
        *,
        today: dt.date,
        now: dt.datetime,
        tz: dt.tzinfo,
        history_days: int = cat.HISTORY_DAYS,
    ) -> None:
        self.today, self.now, self.tz = today, now, tz
        self.history_days = history_days
        self.specs = {spec.code: spec for spec in cat.INSTRUMENTS}
        self.people = {spec.username: spec for spec in cat.USERS}
        self.training: dict[tuple[str, str], _Training] = {
            (t.username, t.instrument): _Training(
                t.level,
                today + dt.timedelta(days=t.granted_day),
                None if t.expires_day is None else today + dt.timedelta(days=t.expires_day),
            )
            for t in cat.TRAINING
        }

    def _level_on(self, username: str, code: str, day: dt.date) -> int:
        record = self.training.get((username, code))
        if record is None or day < record.first or (record.last and day > record.last):
            return 0
        return record.level

    def _accounts_on(self, username: str, day: dt.date) -> list[str]:
        group = self.people[username].group
        codes = []
        for account in cat.ACCOUNTS:
            first = self.today + dt.timedelta(days=account.from_day)
            last = (
                None if account.to_day is None else self.today + dt.timedelta(days=account.to_day)
            )
            if account.group == group and first <= day and (last is None or day <= last):
                codes.append(account.code)
        return codes

    def plan(self) -> list[Slot]:
        slots: list[Slot] = []
        for offset in range(-self.history_days, cat.FUTURE_DAYS + 1):
            day = self.today + dt.timedelta(days=offset)
            slots.extend(self._plan_day(day, offset))
        slots.sort(key=lambda s: (s.starts_at, s.instrument))
        return slots

    def _plan_day(self, day: dt.date, offset: int) -> list[Slot]:
        drawn: list[Slot] = []
        for code, spec in self.specs.items():
            rng = random.Random(f"{cat.SEED}:{code}:{offset}")
            for start, end, kind, ooh in _day_times(spec, day, rng):
                slot_rng = random.Random(f"{cat.SEED}:{code}:{offset}:{start}")
                drawn.append(
                    Slot(
                        code, _at(day, start, self.tz), _at(day, end, self.tz), kind, ooh, slot_rng
                    )
                )
        drawn.sort(key=lambda s: (s.starts_at, s.instrument))
        busy: dict[str, list[Slot]] = {}
        kept = []
        for slot in drawn:
            if self._assign(slot, day, busy) and self._decide(slot):
                kept.append(slot)
        return kept

    def _free(self, username: str, slot: Slot, busy: dict[str, list[Slot]]) -> bool:
        return all(
            other.ends_at <= slot.starts_at or other.starts_at >= slot.ends_at
            for other in busy.get(username, [])
        )

    def _assign(self, slot: Slot, day: dt.date, busy: dict[str, list[Slot]]) -> bool:
        rng = slot.rng
        if slot.kind == SERVICE:
            if not self._free(cat.STAFF, slot, busy):
                return False
            slot.user, slot.purpose = cat.STAFF, Purpose.SERVICE
            slot.account = self._accounts_on(cat.STAFF, day)[0]
            busy.setdefault(cat.STAFF, []).append(slot)
            return True
        staff_free = self._free(cat.STAFF, slot, busy)
        coater = self.specs[slot.instrument].kind == InstrumentKind.COATER
        candidates: list[tuple[str, int]] = []
        for username, person in self.people.items():
            level = self._level_on(username, slot.instrument, day)
            if level == 0 or not self._free(username, slot, busy):
                continue
            if not self._accounts_on(username, day):
                continue
            needs_staff = level == TrainingLevel.SUPERVISED or person.rate == "commercial"
            if slot.out_of_hours and level < TrainingLevel.OUT_OF_HOURS:
                continue
            if slot.kind == WALK_UP and (needs_staff or level < TrainingLevel.INDEPENDENT):
                continue
            if needs_staff and not (staff_free and not slot.out_of_hours):
                continue
            candidates.append((username, level))
        if not candidates:
            return False
        weights = [self.people[name].activity for name, _ in candidates]
        username, level = rng.choices(candidates, weights=weights)[0]
        slot.user = username
        slot.account = rng.choice(self._accounts_on(username, day))
        person = self.people[username]
        if coater or slot.kind == WALK_UP:
            slot.purpose = Purpose.OWN_USE
        elif level == TrainingLevel.SUPERVISED and person.rate != "commercial":
            slot.purpose = Purpose.TRAINING if rng.random() < 0.4 else Purpose.ASSISTED
        elif person.rate == "commercial" or (
            staff_free and not slot.out_of_hours and rng.random() < 0.07
        ):
            slot.purpose = Purpose.ASSISTED
        if slot.purpose in (Purpose.ASSISTED, Purpose.TRAINING):
            busy.setdefault(cat.STAFF, []).append(slot)
        busy.setdefault(username, []).append(slot)
        return True

    def _decide(self, slot: Slot) -> bool:
        """Choose the outcome; False drops the slot (it is under way now, or thinned out)."""
        rng = slot.rng
        if slot.ends_at <= self.now:
            if slot.kind != BOOKING or slot.purpose == Purpose.TRAINING:
                slot.outcome = DONE
                return True
            roll = rng.random()
            slot.outcome = (
                CANCELLED
                if roll < 0.06
                else LATE_CANCELLED
                if roll < 0.10
                else NO_SHOW
                if roll < 0.14
                else DONE
            )
            return True
        if slot.starts_at <= self.now or slot.kind == WALK_UP:
            return False
        # "A few" future bookings: most of the drawn future slots are left free.
        if slot.kind != SERVICE and rng.random() > 0.3:
            return False
        slot.outcome = FUTURE_CANCELLED if rng.random() < 0.12 else FUTURE
        return True
