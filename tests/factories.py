"""factory_boy factories for the domain models. Invented names only."""

from __future__ import annotations

import datetime as dt

import factory
from django.contrib.auth import get_user_model
from django.utils import timezone

from facility.bookings.models import Booking, BookingState, Purpose
from facility.instruments.models import (
    EmitterType,
    Instrument,
    InstrumentKind,
    Pump,
    PumpKind,
    TrainingLevel,
    TrainingRecord,
)
from facility.logbook.models import (
    Coating,
    Conditions,
    Conductivity,
    InstrumentSession,
    MaterialClass,
    Specimen,
    SpecimenForm,
)
from facility.people.models import Account, AccountKind, Group, Membership, Profile, RateCategory

User = get_user_model()


class UserFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = User
        django_get_or_create = ("username",)
        skip_postgeneration_save = True

    username = factory.Sequence(lambda n: f"user{n}")
    first_name = factory.Sequence(lambda n: f"Tester{n}")
    last_name = "Example"
    email = factory.LazyAttribute(lambda o: f"{o.username}@example.org")
    password = factory.PostGenerationMethodCall("set_password", "correct-horse-42")

    @factory.post_generation
    def profile(obj, create, extracted, **kwargs):
        if create:
            Profile.objects.get_or_create(user=obj, defaults=kwargs or {})
            obj.save()


class GroupFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Group
        django_get_or_create = ("name",)

    name = factory.Sequence(lambda n: f"Group {n}")


class MembershipFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Membership

    user = factory.SubFactory(UserFactory)
    group = factory.SubFactory(GroupFactory)


class AccountFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Account

    code = factory.Sequence(lambda n: f"CC-{n:04d}")
    name = factory.Sequence(lambda n: f"Account {n}")
    kind = AccountKind.COST_CENTRE
    group = factory.SubFactory(GroupFactory)
    valid_from = dt.date(2020, 1, 1)
    valid_to = None


class InstrumentFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Instrument
        django_get_or_create = ("code",)

    code = factory.Sequence(lambda n: f"sem-{n}")
    name = factory.Sequence(lambda n: f"Test SEM {n}")
    kind = InstrumentKind.SEM
    emitter_type = EmitterType.SCHOTTKY
    vacuum_modes = ["high", "low"]
    bookable_from = dt.time(8, 0)
    bookable_until = dt.time(18, 0)
    max_booking_minutes = 8 * 60
    cancellation_deadline_hours = 24


class PumpFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Pump

    instrument = factory.SubFactory(InstrumentFactory)
    name = factory.Sequence(lambda n: f"pump {n}")
    kind = PumpKind.TURBO
    installed_on = dt.date(2024, 1, 1)


class TrainingRecordFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = TrainingRecord

    user = factory.SubFactory(UserFactory)
    instrument = factory.SubFactory(InstrumentFactory)
    level = TrainingLevel.INDEPENDENT
    granted_on = dt.date(2020, 1, 1)
    expires_on = None


class BookingFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Booking

    instrument = factory.SubFactory(InstrumentFactory)
    user = factory.SubFactory(UserFactory)
    account = factory.SubFactory(AccountFactory)
    starts_at = factory.LazyFunction(lambda: timezone.now() + dt.timedelta(days=2))
    ends_at = factory.LazyAttribute(lambda o: o.starts_at + dt.timedelta(hours=2))
    purpose = Purpose.OWN_USE
    state = BookingState.CONFIRMED


class SpecimenFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Specimen

    name = factory.Sequence(lambda n: f"specimen {n}")
    material = "alumina"
    material_class = MaterialClass.CERAMIC
    conductivity = Conductivity.INSULATING
    form = SpecimenForm.BULK
    owner = factory.SubFactory(UserFactory)
    group = factory.SubFactory(GroupFactory)


class CoatingFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Coating

    specimen = factory.SubFactory(SpecimenFactory)
    material = "Au-Pd"
    thickness_nm = 5.0


class InstrumentSessionFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = InstrumentSession

    instrument = factory.SubFactory(InstrumentFactory)
    operator = factory.SubFactory(UserFactory)
    account = factory.SubFactory(AccountFactory)
    started_at = factory.LazyFunction(lambda: timezone.now() - dt.timedelta(hours=3))
    ended_at = factory.LazyAttribute(lambda o: o.started_at + dt.timedelta(hours=2))
    beam_on_hours = factory.LazyAttribute(lambda o: None if o.ended_at is None else 2)


class ConditionsFactory(factory.django.DjangoModelFactory):
    class Meta:
        model = Conditions

    session = factory.SubFactory(InstrumentSessionFactory)
    accelerating_voltage_kv = 5.0
    working_distance_mm = 6.0
    detector = "SE"


__all__ = [
    "AccountFactory",
    "BookingFactory",
    "CoatingFactory",
    "ConditionsFactory",
    "GroupFactory",
    "InstrumentFactory",
    "InstrumentSessionFactory",
    "MembershipFactory",
    "PumpFactory",
    "RateCategory",
    "SpecimenFactory",
    "TrainingRecordFactory",
    "UserFactory",
]
