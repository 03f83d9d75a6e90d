"""Writes on bookings: book, move, confirm, cancel, mark a no-show.

Every rule lives here (and in rules.py); views and the API only call these functions.
"""

from __future__ import annotations

import datetime as dt

from django.contrib.auth.models import AbstractBaseUser
from django.db import IntegrityError, transaction
from django.utils import timezone

from facility.bookings import rules
from facility.bookings.models import Booking, BookingState, Purpose
from facility.bookings.queries import overlapping
from facility.errors import Conflict, Invalid, NotAllowed
from facility.instruments.models import Instrument
from facility.people.models import Account
from facility.people.queries import is_staff, led_group_ids

OVERLAP_CONSTRAINT = "booking_no_overlap"


def _clash(instrument: Instrument, starts_at: dt.datetime, ends_at: dt.datetime) -> Conflict:
    # Names the taken time but never who holds it.
    return Conflict(
        f"{instrument.name} is already booked for part of "
        f"{rules.format_moment(starts_at)}–{timezone.localtime(ends_at):%H:%M}; choose a free slot."
    )


def _one_writer_per_instrument(instrument: Instrument) -> None:
    """Hold the instrument's row until the caller's transaction ends.

    On PostgreSQL, concurrent inserts checked by the exclusion constraint can deadlock, each
    waiting for the other's row while checking its own; queued on the instrument's row, the
    later writer sees the earlier booking in its overlap check and gets a clash. A no-op on
    SQLite, whose write transactions are serialised already.
    """
    list(Instrument.objects.select_for_update().filter(pk=instrument.pk).values_list("pk"))


def _check_free(
    instrument: Instrument,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    *,
    exclude_id: int | None = None,
) -> None:
    _one_writer_per_instrument(instrument)
    if overlapping(instrument, starts_at, ends_at, exclude_id=exclude_id).exists():
        raise _clash(instrument, starts_at, ends_at)


def _is_overlap_violation(exc: IntegrityError) -> bool:
    return OVERLAP_CONSTRAINT in str(exc)


def _validate(
    *,
    user: AbstractBaseUser,
    instrument: Instrument,
    account: Account,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    purpose: str,
    by: AbstractBaseUser,
    override_hours: bool,
    now: dt.datetime,
) -> None:
    if override_hours and not is_staff(by):
        raise NotAllowed("Only facility staff can book outside the bookable hours.")
    rules.check_times(starts_at, ends_at)
    rules.check_purpose(purpose, by=by)
    rules.check_instrument_open(instrument)
    rules.check_not_past(starts_at, by=by, now=now)
    rules.check_length(instrument, starts_at, ends_at)
    out_of_hours = rules.check_hours(instrument, starts_at, ends_at, staff_override=override_hours)
    if not is_staff(user) and purpose != Purpose.SERVICE:
        needs_ooh = out_of_hours and not override_hours
        level = rules.required_level(purpose, needs_ooh)
        rules.check_training(user, instrument, starts_at, ends_at, level=level)
    rules.check_account(account, user, starts_at, ends_at)


def book(
    *,
    user: AbstractBaseUser,
    instrument: Instrument,
    account: Account,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    purpose: str = Purpose.OWN_USE,
    note: str = "",
    by: AbstractBaseUser | None = None,
    override_hours: bool = False,
    idempotency_key: str = "",
    now: dt.datetime | None = None,
) -> Booking:
    """Book `instrument` for `user` on `account` from `starts_at` to `ends_at` (half-open).

    `by` is who asks (defaults to the user); staff may book for others, record past bookings and,
    with `override_hours`, book outside the bookable hours. A repeated `idempotency_key` from the
    same user returns the booking it made the first time.
    """
    by = by or user
    now = now or timezone.now()
    if by != user and not is_staff(by):
        raise NotAllowed("Only facility staff can book for someone else.")
    if idempotency_key:
        earlier = Booking.objects.filter(user=user, idempotency_key=idempotency_key).first()
        if earlier is not None:
            return _same_request(earlier, instrument, starts_at, ends_at)
    with transaction.atomic():
        _validate(
            user=user,
            instrument=instrument,
            account=account,
            starts_at=starts_at,
            ends_at=ends_at,
            purpose=purpose,
            by=by,
            override_hours=override_hours,
            now=now,
        )
        _check_free(instrument, starts_at, ends_at)
        try:
            with transaction.atomic():
                return Booking.objects.create(
                    instrument=instrument,
                    user=user,
                    account=account,
                    starts_at=starts_at,
                    ends_at=ends_at,
                    purpose=purpose,
                    note=note,
                    state=BookingState.CONFIRMED,
                    created_by=by,
                    idempotency_key=idempotency_key,
                )
        except IntegrityError as exc:
            if _is_overlap_violation(exc):
                raise _clash(instrument, starts_at, ends_at) from None
            if idempotency_key and "idempotency" in str(exc):
                earlier = Booking.objects.get(user=user, idempotency_key=idempotency_key)
                return _same_request(earlier, instrument, starts_at, ends_at)
            raise


def _same_request(
    earlier: Booking, instrument: Instrument, starts_at: dt.datetime, ends_at: dt.datetime
) -> Booking:
    if (earlier.instrument_id, earlier.starts_at, earlier.ends_at) != (
        instrument.id,
        starts_at,
        ends_at,
    ):
        raise Conflict(
            "This idempotency key was already used for a different booking; use a new key."
        )
    return earlier


def may_change(booking: Booking, by: AbstractBaseUser) -> bool:
    """Who may move or cancel a booking: who booked it, their group leader, or staff."""
    return is_staff(by) or booking.user_id == by.id or booking.account.group_id in led_group_ids(by)


def move(
    *,
    booking: Booking,
    by: AbstractBaseUser,
    starts_at: dt.datetime,
    ends_at: dt.datetime,
    override_hours: bool = False,
    now: dt.datetime | None = None,
) -> Booking:
    """Move a future booking to a new time, under the same rules as a new booking."""
    now = now or timezone.now()
    with transaction.atomic():
        booking = (
            Booking.objects.select_for_update()
            .select_related("instrument", "account")
            .get(pk=booking.pk)
        )
        if not may_change(booking, by):
            raise NotAllowed("Only the person who booked, their group leader or staff can move it.")
        if booking.state not in (BookingState.REQUESTED, BookingState.CONFIRMED):
            raise Conflict(f"A booking that is {booking.get_state_display().lower()} cannot move.")
        if booking.starts_at <= now and not is_staff(by):
            raise Conflict("This booking has started; it can no longer be moved.")
        _validate(
            user=booking.user,
            instrument=booking.instrument,
            account=booking.account,
            starts_at=starts_at,
            ends_at=ends_at,
            purpose=booking.purpose,
            by=by,
            override_hours=override_hours,
            now=now,
        )
        _check_free(booking.instrument, starts_at, ends_at, exclude_id=booking.pk)
        booking.starts_at, booking.ends_at = starts_at, ends_at
        try:
            with transaction.atomic():
                booking.save(update_fields=["starts_at", "ends_at"])
        except IntegrityError as exc:
            if _is_overlap_violation(exc):
                raise _clash(booking.instrument, starts_at, ends_at) from None
            raise
        return booking


def late_cancellation_applies(booking: Booking, now: dt.datetime | None = None) -> bool:
    """Whether cancelling now would be late (after the instrument's cancellation deadline)."""
    now = now or timezone.now()
    deadline = booking.starts_at - dt.timedelta(
        hours=booking.instrument.cancellation_deadline_hours
    )
    return now > deadline


def cancel(*, booking: Booking, by: AbstractBaseUser, now: dt.datetime | None = None) -> Booking:
    """Cancel a booking: before the deadline it is simply cancelled, after it late-cancelled."""
    now = now or timezone.now()
    with transaction.atomic():
        booking = (
            Booking.objects.select_for_update()
            .select_related("instrument", "account")
            .get(pk=booking.pk)
        )
        if not may_change(booking, by):
            raise NotAllowed(
                "Only the person who booked, their group leader or staff can cancel it."
            )
        if booking.state not in (BookingState.REQUESTED, BookingState.CONFIRMED):
            raise Conflict(
                f"This booking is already {booking.get_state_display().lower()}; nothing to cancel."
            )
        if now >= booking.ends_at:
            raise Conflict("This booking is over; it can no longer be cancelled.")
        booking.state = (
            BookingState.LATE_CANCELLED
            if late_cancellation_applies(booking, now)
            else BookingState.CANCELLED
        )
        booking.cancelled_at = now
        booking.save(update_fields=["state", "cancelled_at"])
        return booking


def confirm(*, booking: Booking, by: AbstractBaseUser) -> Booking:
    """Staff approve a requested booking."""
    if not is_staff(by):
        raise NotAllowed("Only facility staff can confirm bookings.")
    with transaction.atomic():
        booking = Booking.objects.select_for_update().get(pk=booking.pk)
        if booking.state != BookingState.REQUESTED:
            raise Conflict(
                f"Only a requested booking can be confirmed; this one is {booking.state}."
            )
        booking.state = BookingState.CONFIRMED
        booking.save(update_fields=["state"])
        return booking


def mark_no_show(
    *, booking: Booking, by: AbstractBaseUser, now: dt.datetime | None = None
) -> Booking:
    """Staff record that nobody came. Frees the rest of the slot for others."""
    now = now or timezone.now()
    if not is_staff(by):
        raise NotAllowed("Only facility staff can mark a no-show.")
    with transaction.atomic():
        booking = Booking.objects.select_for_update().get(pk=booking.pk)
        if booking.state not in (BookingState.REQUESTED, BookingState.CONFIRMED):
            raise Conflict(
                f"Only a live booking can be a no-show; this one is {booking.get_state_display()}."
            )
        if now < booking.starts_at:
            raise Invalid("The booking has not started yet; it cannot be a no-show.")
        if hasattr(booking, "session"):
            raise Conflict("Someone checked in for this booking; it is not a no-show.")
        booking.state = BookingState.NO_SHOW
        booking.save(update_fields=["state"])
        return booking


def mark_done(*, booking: Booking) -> Booking:
    """Called by the logbook when the booking's session is checked out."""
    if booking.state in (BookingState.REQUESTED, BookingState.CONFIRMED):
        booking.state = BookingState.DONE
        booking.save(update_fields=["state"])
    return booking
