"""Booking pages: book a slot, see a booking, cancel it, confirm or record a no-show (staff), and
the private iCalendar feeds. Thin: parse, call one service or query, render."""

from __future__ import annotations

import datetime as dt

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.utils.http import url_has_allowed_host_and_scheme
from django.views.decorators.http import require_GET, require_POST

from facility.bookings import feeds, services
from facility.bookings.forms import LOCAL_INPUT, BookingForm, show_refusal
from facility.bookings.models import LIVE_STATES, Booking, BookingState
from facility.bookings.queries import visible_to
from facility.bookings.services import may_change
from facility.bookings.weekgrid import monday_of
from facility.errors import DomainError, NotAllowed
from facility.instruments.models import Instrument
from facility.people.queries import is_staff, led_group_ids


def _local(moment: dt.datetime) -> str:
    return timezone.localtime(moment).strftime("%a %d %b %Y, %H:%M")


def _week_url(booking: Booking) -> str:
    monday = monday_of(timezone.localdate(booking.starts_at))
    url = reverse("instrument-detail", args=[booking.instrument.code])
    return f"{url}?week={monday.isoformat()}"


def _parse_local(text: str | None) -> dt.datetime | None:
    if not text:
        return None
    try:
        naive = dt.datetime.strptime(text[:16], LOCAL_INPUT)
    except ValueError:
        return None
    return timezone.make_aware(naive)


@login_required
def new_booking(request: HttpRequest, code: str) -> HttpResponse:
    instrument = get_object_or_404(Instrument, code=code, is_active=True)
    if request.method == "POST":
        form = BookingForm(request.POST, user=request.user)
        if form.is_valid():
            data = form.cleaned_data
            try:
                booking = services.book(
                    user=request.user,
                    instrument=instrument,
                    account=data["account"],
                    starts_at=data["starts_at"],
                    ends_at=data["ends_at"],
                    purpose=data["purpose"],
                    note=data["note"],
                )
            except DomainError as error:
                show_refusal(form, error)
                return _booking_form(request, instrument, form, status=error.http_status)
            messages.success(
                request,
                f"Booked {instrument.name} from {_local(booking.starts_at)} to "
                f"{timezone.localtime(booking.ends_at):%H:%M}.",
            )
            return redirect(_week_url(booking))
        return _booking_form(request, instrument, form, status=400)
    start = _parse_local(request.GET.get("start"))
    end = _parse_local(request.GET.get("end"))
    if start and not end:
        end = start + dt.timedelta(hours=1)
    form = BookingForm(user=request.user, initial={"starts_at": start, "ends_at": end})
    return _booking_form(request, instrument, form)


def _booking_form(
    request: HttpRequest, instrument: Instrument, form: BookingForm, status: int = 200
) -> HttpResponse:
    return render(
        request,
        "bookings/booking_form.html",
        {
            "instrument": instrument,
            "form": form,
            "no_accounts": not form.fields["account"].queryset.exists(),
            "nav": "instruments",
        },
        status=status,
    )


@login_required
@require_GET
def booking_list(request: HttpRequest) -> HttpResponse:
    now = timezone.now()
    mine = visible_to(request.user).filter(user=request.user)
    upcoming = list(mine.filter(state__in=LIVE_STATES, ends_at__gt=now).order_by("starts_at")[:50])
    past = list(mine.exclude(pk__in=[b.pk for b in upcoming]).order_by("-starts_at")[:30])
    led = led_group_ids(request.user)
    group_upcoming = []
    if led:
        group_upcoming = list(
            visible_to(request.user)
            .filter(account__group_id__in=led, state__in=LIVE_STATES, ends_at__gt=now)
            .exclude(user=request.user)
            .order_by("starts_at")[:50]
        )
    return render(
        request,
        "bookings/booking_list.html",
        {"upcoming": upcoming, "past": past, "group_upcoming": group_upcoming, "nav": "bookings"},
    )


@login_required
@require_GET
def booking_detail(request: HttpRequest, pk: int) -> HttpResponse:
    booking = get_object_or_404(visible_to(request.user), pk=pk)
    now = timezone.now()
    live = booking.state in (BookingState.REQUESTED, BookingState.CONFIRMED)
    staff = is_staff(request.user)
    return render(
        request,
        "bookings/booking_detail.html",
        {
            "booking": booking,
            "can_cancel": live and now < booking.ends_at and may_change(booking, request.user),
            "can_confirm": staff and booking.state == BookingState.REQUESTED,
            "can_no_show": staff
            and live
            and booking.starts_at <= now
            and not hasattr(booking, "session"),
            "week_url": _week_url(booking),
            "nav": "bookings",
        },
    )


@login_required
def cancel_booking(request: HttpRequest, pk: int) -> HttpResponse:
    booking = get_object_or_404(visible_to(request.user), pk=pk)
    if not may_change(booking, request.user):
        raise PermissionDenied(
            "Only the person who booked, their group leader or staff can cancel this booking."
        )
    if request.method == "POST":
        try:
            booking = services.cancel(booking=booking, by=request.user)
        except NotAllowed as error:
            raise PermissionDenied(error.message) from None
        except DomainError as error:
            messages.error(request, error.message)
            return redirect("booking-detail", pk=booking.pk)
        if booking.state == BookingState.LATE_CANCELLED:
            messages.warning(
                request,
                f"Booking cancelled late. A late cancellation is charged as set in the tariff "
                f"of {booking.instrument.name}.",
            )
        else:
            messages.success(request, "Booking cancelled; no charge.")
        return redirect(_week_url(booking))
    now = timezone.now()
    deadline = booking.starts_at - dt.timedelta(
        hours=booking.instrument.cancellation_deadline_hours
    )
    return render(
        request,
        "bookings/booking_cancel.html",
        {
            "booking": booking,
            "late": services.late_cancellation_applies(booking, now),
            "deadline": deadline,
            "cancellable": booking.state in (BookingState.REQUESTED, BookingState.CONFIRMED)
            and now < booking.ends_at,
            "nav": "bookings",
        },
    )


def _staff_action(request: HttpRequest, pk: int, action, done: str) -> HttpResponse:
    booking = get_object_or_404(visible_to(request.user), pk=pk)
    try:
        action(booking=booking, by=request.user)
    except NotAllowed as error:
        raise PermissionDenied(error.message) from None
    except DomainError as error:
        messages.error(request, error.message)
    else:
        messages.success(request, done)
    back = request.POST.get("next", "")
    if not url_has_allowed_host_and_scheme(back, allowed_hosts={request.get_host()}):
        back = reverse("booking-detail", args=[booking.pk])
    return redirect(back)


@login_required
@require_POST
def confirm_booking(request: HttpRequest, pk: int) -> HttpResponse:
    return _staff_action(request, pk, services.confirm, "Booking confirmed.")


@login_required
@require_POST
def no_show(request: HttpRequest, pk: int) -> HttpResponse:
    return _staff_action(request, pk, services.mark_no_show, "Recorded as a no-show.")


# --- iCalendar feeds -------------------------------------------------------------------------


@login_required
@require_GET
def calendar_feeds(request: HttpRequest) -> HttpResponse:
    token = feeds.feed_token(request.user)
    instruments = Instrument.objects.filter(is_active=True).only("code", "name")
    personal = request.build_absolute_uri(reverse("feed-personal", args=[token]))
    per_instrument = [
        (i, request.build_absolute_uri(reverse("feed-instrument", args=[token, i.code])))
        for i in instruments
    ]
    return render(
        request,
        "bookings/calendar_feeds.html",
        {"personal": personal, "per_instrument": per_instrument, "nav": "feeds"},
    )


def _ics(body: bytes, name: str) -> HttpResponse:
    response = HttpResponse(body, content_type="text/calendar; charset=utf-8")
    response["Content-Disposition"] = f'inline; filename="{name}.ics"'
    # The URL is the secret: keep it out of shared caches.
    response["Cache-Control"] = "private, max-age=900"
    response["X-Robots-Tag"] = "noindex"
    return response


def _booking_url(request: HttpRequest):
    return lambda b: request.build_absolute_uri(reverse("booking-detail", args=[b.pk]))


@require_GET
def personal_feed(request: HttpRequest, token: str) -> HttpResponse:
    user = feeds.user_for_token(token)
    if user is None:
        raise Http404("No such calendar feed.")
    start, end = feeds.window()
    bookings = Booking.objects.filter(
        user=user, state__in=LIVE_STATES, ends_at__gt=start, starts_at__lt=end
    ).select_related("instrument", "account")
    body = feeds.personal_calendar(
        user, bookings, host=request.get_host().split(":")[0], url_for=_booking_url(request)
    )
    return _ics(body, "my-bookings")


@require_GET
def instrument_feed(request: HttpRequest, token: str, code: str) -> HttpResponse:
    user = feeds.user_for_token(token)
    if user is None:
        raise Http404("No such calendar feed.")
    instrument = get_object_or_404(Instrument, code=code, is_active=True)
    start, end = feeds.window()
    bookings = Booking.objects.filter(
        instrument=instrument, state__in=LIVE_STATES, ends_at__gt=start, starts_at__lt=end
    ).select_related("instrument", "user")
    body = feeds.instrument_calendar(
        instrument,
        bookings,
        viewer=user,
        viewer_is_staff=is_staff(user),
        host=request.get_host().split(":")[0],
        url_for=_booking_url(request),
    )
    return _ics(body, instrument.code)
