"""Writes on the logbook: check in, check out, and log specimen, coating and conditions."""

from __future__ import annotations

import datetime as dt
import hashlib
from decimal import ROUND_HALF_UP, Decimal
from typing import Any

from django.contrib.auth.models import AbstractBaseUser
from django.db import IntegrityError, transaction
from django.utils import timezone

from facility.bookings import rules as booking_rules
from facility.bookings import services as booking_services
from facility.bookings.models import LIVE_STATES, Booking, BookingState, Purpose
from facility.bookings.queries import overlapping
from facility.errors import Closed, Conflict, Invalid, NotAllowed
from facility.instruments.models import Instrument, VacuumMode
from facility.logbook import flags
from facility.logbook.models import (
    Coating,
    CoatingMaterial,
    CoatingMethod,
    Conditions,
    ConditionsSource,
    Conductivity,
    InstrumentSession,
    MaterialClass,
    Specimen,
    SpecimenForm,
)
from facility.people.models import Account
from facility.people.queries import group_ids_of, is_staff
from facility.people.services import notify_staff

# How early before a booking's start its holder may check in.
EARLY_CHECK_IN = dt.timedelta(minutes=30)

# Plausible ranges for logged settings: (low, high, unit). SEM 0.05–30 kV and TEM up to 300 kV
# (DOMAIN.md); the rest are wide bounds that only catch typing mistakes (common practice, no source).
CONDITION_RANGES: dict[str, tuple[float, float, str]] = {
    "accelerating_voltage_kv": (0.01, 300.0, "kV"),
    "working_distance_mm": (0.0, 100.0, "mm"),
    "probe_current_na": (1e-6, 1e5, "nA"),
    "spot_size": (0.0, 100.0, ""),
    "aperture_um": (0.0, 5000.0, "µm"),
    "dwell_time_us": (1e-3, 1e7, "µs"),
    "magnification": (1.0, 1e8, "×"),
    "chamber_pressure_pa": (0.0, 1e5, "Pa"),
    "tilt_deg": (-90.0, 90.0, "°"),
}
TEXT_CONDITIONS = {"label", "detector", "vacuum_mode"}


def _may_log(session: InstrumentSession, by: AbstractBaseUser) -> None:
    if session.operator_id != by.id and not is_staff(by):
        raise NotAllowed("Only the session's operator or facility staff can change its log.")


def _current_booking(user: AbstractBaseUser, instrument: Instrument, now: dt.datetime):
    return (
        Booking.objects.filter(
            user=user,
            instrument=instrument,
            state__in=(BookingState.REQUESTED, BookingState.CONFIRMED),
            starts_at__lte=now + EARLY_CHECK_IN,
            ends_at__gt=now,
        )
        .order_by("starts_at")
        .first()
    )


def check_in(
    *,
    user: AbstractBaseUser,
    instrument: Instrument,
    booking: Booking | None = None,
    account: Account | None = None,
    purpose: str | None = None,
    by: AbstractBaseUser | None = None,
    now: dt.datetime | None = None,
    idempotency_key: str = "",
) -> InstrumentSession:
    """Open a session on `instrument` for `user`.

    With a booking (given, or the user's booking that covers now) the session takes its account
    and purpose. Without one it is a walk-up: allowed when nobody else holds the instrument now,
    with the same training and account rules as a booking.
    """
    by = by or user
    now = now or timezone.now()
    if by != user and not is_staff(by):
        raise NotAllowed("Only facility staff can check someone else in.")
    if idempotency_key:
        earlier = InstrumentSession.objects.filter(
            operator=user, idempotency_key=idempotency_key
        ).first()
        if earlier is not None:
            if earlier.instrument_id != instrument.id:
                raise Conflict("This idempotency key was already used on another instrument.")
            return earlier
    with transaction.atomic():
        booking_rules.check_instrument_open(instrument)
        if InstrumentSession.objects.filter(instrument=instrument, ended_at__isnull=True).exists():
            raise Conflict(
                f"{instrument.name} already has an open session; it must be checked out first."
            )
        if booking is None:
            booking = _current_booking(user, instrument, now)
        if booking is not None:
            booking = Booking.objects.select_for_update().get(pk=booking.pk)
            _check_booking_usable(booking, user, instrument, now)
            account = booking.account
            purpose = booking.purpose
        else:
            purpose = purpose or Purpose.OWN_USE
            if account is None:
                raise Invalid(
                    "A walk-up session needs an account to charge; choose one of your group's.",
                    fields={"account": ["Required for a walk-up session."]},
                )
            _check_walk_up(user, instrument, account, purpose, now, by)
        try:
            with transaction.atomic():
                return InstrumentSession.objects.create(
                    instrument=instrument,
                    operator=user,
                    account=account,
                    booking=booking,
                    purpose=purpose,
                    started_at=now,
                    vacuum_mode=VacuumMode.HIGH,
                    idempotency_key=idempotency_key,
                )
        except IntegrityError as exc:
            # PostgreSQL names the constraint; SQLite names the column it guards.
            message = str(exc)
            if (
                "session_one_open_per_instrument" in message
                or "logbook_instrumentsession.instrument_id" in message
            ):
                raise Conflict(
                    f"{instrument.name} already has an open session; it must be checked out first."
                ) from None
            raise


def _check_booking_usable(
    booking: Booking, user: AbstractBaseUser, instrument: Instrument, now: dt.datetime
) -> None:
    if booking.user_id != user.id:
        raise NotAllowed("That booking belongs to someone else.")
    if booking.instrument_id != instrument.id:
        raise Invalid(f"That booking is for another instrument, not {instrument.name}.")
    if booking.state not in (BookingState.REQUESTED, BookingState.CONFIRMED):
        raise Conflict(f"That booking is {booking.get_state_display().lower()}; it cannot start.")
    if now < booking.starts_at - EARLY_CHECK_IN:
        raise Conflict(
            f"The booking starts {booking_rules.format_moment(booking.starts_at)}; check in from "
            f"{int(EARLY_CHECK_IN.total_seconds() // 60)} minutes before."
        )
    if now >= booking.ends_at:
        raise Conflict("That booking is over; book again or check in as a walk-up.")


def _check_walk_up(
    user: AbstractBaseUser,
    instrument: Instrument,
    account: Account,
    purpose: str,
    now: dt.datetime,
    by: AbstractBaseUser,
) -> None:
    others = overlapping(instrument, now, now + dt.timedelta(minutes=1)).exclude(user=user)
    if others.filter(state__in=LIVE_STATES).exists():
        raise Conflict(
            f"{instrument.name} is booked by someone else right now; a walk-up needs it free."
        )
    booking_rules.check_purpose(purpose, by=by)
    if not is_staff(user) and purpose != Purpose.SERVICE:
        out = booking_rules.is_out_of_hours(instrument, now, now + dt.timedelta(minutes=1))
        level = booking_rules.required_level(purpose, out)
        booking_rules.check_training(user, instrument, now, now, level=level)
    booking_rules.check_account(account, user, now, now)


def _hours(value: Any) -> Decimal:
    return Decimal(str(value)).quantize(Decimal("0.01"), rounding=ROUND_HALF_UP)


def check_out(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    now: dt.datetime | None = None,
    beam_on_hours: Decimal | float | None = None,
    vent_cycles: int = 0,
    staff_minutes: int | None = None,
) -> InstrumentSession:
    """Close a session. Beam-on hours default to the session's length; vents are counted for upkeep."""
    now = now or timezone.now()
    with transaction.atomic():
        session = InstrumentSession.objects.select_for_update().get(pk=session.pk)
        _may_log(session, by)
        if not session.is_open:
            raise Closed("This session is already checked out.")
        if now <= session.started_at:
            raise Invalid("Check-out must come after check-in.")
        length = _hours((now - session.started_at).total_seconds() / 3600)
        beam = length if beam_on_hours is None else _hours(beam_on_hours)
        if beam < 0 or beam > length:
            raise Invalid(
                f"Beam-on time must be between 0 and the session's {length} h.",
                fields={"beam_on_hours": [f"Between 0 and {length}."]},
            )
        if vent_cycles < 0 or vent_cycles > 1000:
            raise Invalid(
                "Vent cycles must be a whole number from 0.", fields={"vent_cycles": ["From 0."]}
            )
        if staff_minutes is not None:
            if staff_minutes < 0:
                raise Invalid("Staff minutes cannot be negative.")
            session.staff_minutes = staff_minutes
        session.ended_at = now
        session.beam_on_hours = beam
        session.vent_cycles = vent_cycles
        session.save(update_fields=["ended_at", "beam_on_hours", "vent_cycles", "staff_minutes"])
        if session.booking_id:
            booking_services.mark_done(booking=session.booking)
        return session


def _choice(value: str, choices: type, field: str) -> str:
    if value not in choices.values:
        raise Invalid(
            f"Unknown {field.replace('_', ' ')} {value!r}; use one of {', '.join(choices.values)}.",
            fields={field: ["Unknown value."]},
        )
    return value


def record_specimen(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    specimen: Specimen | None = None,
    **fields: Any,
) -> Specimen:
    """Attach an existing specimen of the operator's group, or describe a new one, to a session."""
    with transaction.atomic():
        _may_log(session, by)
        if specimen is not None:
            allowed = specimen.group_id in group_ids_of(session.operator) or is_staff(by)
            if not allowed:
                raise NotAllowed("That specimen belongs to another group.")
        else:
            required = ("name", "material", "material_class", "conductivity", "form")
            missing = [name for name in required if not fields.get(name)]
            if missing:
                raise Invalid(
                    "Describe the specimen: "
                    + ", ".join(m.replace("_", " ") for m in missing)
                    + ".",
                    fields={m: ["Required."] for m in missing},
                )
            _choice(fields["material_class"], MaterialClass, "material_class")
            _choice(fields["conductivity"], Conductivity, "conductivity")
            _choice(fields["form"], SpecimenForm, "form")
            for name in ("feature_size_nm", "e2_kev"):
                value = fields.get(name)
                if value is not None and not float(value) > 0:
                    raise Invalid(
                        f"{name.replace('_', ' ')} must be positive.", fields={name: ["> 0"]}
                    )
            group_id = session.account.group_id
            known = {f.name for f in Specimen._meta.get_fields()}
            unknown = set(fields) - known
            if unknown:
                raise Invalid(f"Unknown specimen fields: {', '.join(sorted(unknown))}.")
            specimen = Specimen.objects.create(owner=session.operator, group_id=group_id, **fields)
        session.specimen = specimen
        session.save(update_fields=["specimen"])
        flags.recompute(session=session)
        return specimen


def set_coating(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    material: str,
    thickness_nm: float = 0.0,
    method: str | None = None,
    applied_at: dt.datetime | None = None,
) -> Coating:
    """Record the coating the session's specimen carries (`none` for uncoated)."""
    with transaction.atomic():
        _may_log(session, by)
        if session.specimen_id is None:
            raise Invalid("Record the specimen before its coating.")
        _choice(material, CoatingMaterial, "material")
        thickness = float(thickness_nm or 0)
        if material == CoatingMaterial.NONE:
            if thickness:
                raise Invalid("An uncoated specimen has no coating thickness.")
            method = CoatingMethod.NONE
        elif not 0 < thickness <= 1000:
            raise Invalid(
                "Coating thickness must be more than 0 and at most 1000 nm.",
                fields={"thickness_nm": ["Between 0 and 1000 nm."]},
            )
        method = _choice(method or CoatingMethod.SPUTTER, CoatingMethod, "method")
        coating = Coating.objects.create(
            specimen_id=session.specimen_id,
            material=material,
            thickness_nm=thickness,
            method=method,
            applied_at=applied_at,
        )
        session.coating = coating
        session.save(update_fields=["coating"])
        flags.recompute(session=session)
        return coating


def clean_condition_values(values: dict[str, Any]) -> dict[str, Any]:
    """Check logged settings against physical ranges; returns the cleaned values."""
    cleaned: dict[str, Any] = {}
    errors: dict[str, list[str]] = {}
    for name, value in values.items():
        if value is None or value == "":
            continue
        if name in TEXT_CONDITIONS:
            cleaned[name] = str(value).strip()
            continue
        if name not in CONDITION_RANGES:
            errors[name] = ["Unknown setting."]
            continue
        low, high, unit = CONDITION_RANGES[name]
        try:
            number = float(value)
        except (TypeError, ValueError):
            errors[name] = ["Must be a number."]
            continue
        if not low <= number <= high:
            errors[name] = [f"Must be between {low:g} and {high:g} {unit}".strip() + "."]
            continue
        cleaned[name] = number
    if "vacuum_mode" in cleaned and cleaned["vacuum_mode"] not in VacuumMode.values:
        errors["vacuum_mode"] = [f"Use one of {', '.join(VacuumMode.values)}."]
    if errors:
        names = ", ".join(n.replace("_", " ") for n in errors)
        raise Invalid(f"Some settings are out of range or unknown: {names}.", fields=errors)
    return cleaned


def add_conditions(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    source: str = ConditionsSource.LOGGED,
    **values: Any,
) -> Conditions:
    """Log one set of beam and detector settings on a session."""
    cleaned = clean_condition_values(values)
    with transaction.atomic():
        _may_log(session, by)
        conditions = Conditions.objects.create(session=session, source=source, **cleaned)
        flags.recompute(session=session)
        return conditions


def update_conditions(*, conditions: Conditions, by: AbstractBaseUser, **values: Any) -> Conditions:
    cleaned = clean_condition_values(values)
    with transaction.atomic():
        _may_log(conditions.session, by)
        for name, value in cleaned.items():
            setattr(conditions, name, value)
        conditions.save()
        flags.recompute(session=conditions.session)
        return conditions


def report_fault(*, session: InstrumentSession, by: AbstractBaseUser, text: str) -> int:
    """Add a fault report to the session and tell the staff; returns how many were told.

    The same words reported twice on one session are kept once and tell the staff once.
    """
    text = (text or "").strip()
    if not text:
        raise Invalid("Describe the fault.", fields={"fault_report": ["Required."]})
    with transaction.atomic():
        _may_log(session, by)
        session = InstrumentSession.objects.select_for_update().get(pk=session.pk)
        earlier = session.fault_report.strip()
        if text not in earlier:
            session.fault_report = f"{earlier}\n\n{text}" if earlier else text
            session.save(update_fields=["fault_report"])
    who = by.get_full_name() or by.get_username()
    return notify_staff(
        subject=f"Fault reported on {session.instrument.name}",
        body=f"{who} reported during the session of {session.started_at:%Y-%m-%d %H:%M}:\n\n{text}",
        link=f"/sessions/{session.pk}/",
        topic=f"fault:{session.pk}:{hashlib.sha256(text.encode()).hexdigest()[:16]}",
    )


def update_session(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    vacuum_mode: str | None = None,
    notes: str | None = None,
    fault_report: str | None = None,
) -> InstrumentSession:
    with transaction.atomic():
        _may_log(session, by)
        changed = []
        if vacuum_mode is not None:
            session.vacuum_mode = _choice(vacuum_mode, VacuumMode, "vacuum_mode")
            changed.append("vacuum_mode")
        if notes is not None:
            session.notes = notes
            changed.append("notes")
        if fault_report is not None:
            session.fault_report = fault_report
            changed.append("fault_report")
        if changed:
            session.save(update_fields=changed)
            flags.recompute(session=session)
        return session
