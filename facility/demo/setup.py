"""Create the demo's people, groups, accounts, instruments, pumps and training records.

These have no services yet (staff set them up in the admin), so they are created directly.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

from django.contrib.auth import get_user_model
from django.contrib.auth.hashers import make_password

from facility.demo import catalogue as cat
from facility.instruments.models import Instrument, Pump, TrainingRecord
from facility.people.models import Account, Group, Membership, Profile


@dataclass
class Directory:
    """The demo's rows by their catalogue keys."""

    users: dict[str, object] = field(default_factory=dict)
    groups: dict[str, Group] = field(default_factory=dict)
    accounts: dict[str, Account] = field(default_factory=dict)
    instruments: dict[str, Instrument] = field(default_factory=dict)
    pumps: int = 0


def create_people(directory: Directory, today: dt.date) -> None:
    User = get_user_model()
    # One hash for the shared demo password: hashing it per user would cost a second each.
    password = make_password(cat.DEMO_PASSWORD)
    for spec in cat.GROUPS:
        directory.groups[spec.key] = Group.objects.create(
            name=spec.name, shares_details=spec.shares_details
        )
    for spec in cat.USERS:
        user = User.objects.create(
            username=spec.username,
            first_name=spec.first_name,
            last_name=spec.last_name,
            email=f"{spec.username}@{cat.EMAIL_DOMAIN}",
            is_staff=spec.staff,
            is_superuser=spec.staff,
            password=password,
        )
        Profile.objects.create(user=user, role=spec.role, rate_category=spec.rate)
        if spec.group:
            group = directory.groups[spec.group]
            Membership.objects.create(user=user, group=group, joined_on=_day(today, -400))
            if spec.leads:
                group.leader = user
                group.save(update_fields=["leader"])
        directory.users[spec.username] = user
    for spec in cat.ACCOUNTS:
        directory.accounts[spec.code] = Account.objects.create(
            code=spec.code,
            name=spec.name,
            kind=spec.kind,
            group=directory.groups[spec.group],
            valid_from=_day(today, spec.from_day),
            valid_to=None if spec.to_day is None else _day(today, spec.to_day),
        )


def create_equipment(directory: Directory, today: dt.date) -> None:
    for spec in cat.INSTRUMENTS:
        instrument = Instrument.objects.create(
            code=spec.code,
            name=spec.name,
            kind=spec.kind,
            emitter_type=spec.emitter_type,
            location=f"{cat.BUILDING}, {spec.room}",
            vacuum_modes=spec.vacuum_modes,
            expected_resolution_nm=spec.expected_resolution_nm,
            magnification_reference_width_mm=spec.magnification_reference_width_mm,
            bookable_from=spec.bookable_from,
            bookable_until=spec.bookable_until,
            allows_out_of_hours=spec.allows_out_of_hours,
            max_booking_minutes=spec.max_booking_minutes,
            cancellation_deadline_hours=spec.cancellation_deadline_hours,
        )
        for pump in spec.pumps:
            Pump.objects.create(
                instrument=instrument,
                name=pump.name,
                kind=pump.kind,
                runs_continuously=pump.runs_continuously,
                installed_on=_day(today, pump.installed_day),
            )
            directory.pumps += 1
        directory.instruments[spec.code] = instrument
    staff = directory.users[cat.STAFF]
    for spec in cat.TRAINING:
        TrainingRecord.objects.create(
            user=directory.users[spec.username],
            instrument=directory.instruments[spec.instrument],
            level=spec.level,
            granted_on=_day(today, spec.granted_day),
            expires_on=None if spec.expires_day is None else _day(today, spec.expires_day),
            granted_by=staff,
        )


def _day(today: dt.date, offset: int) -> dt.date:
    return today + dt.timedelta(days=offset)
