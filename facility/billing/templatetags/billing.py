"""Billing figures that other apps' pages show: the month-end status on the staff overview and
the cost of a late cancellation on the cancel page.

Those pages belong to the logbook and bookings, which must not import billing (DESIGN.md: apps
import only those to their left); the template layer sits above every app, so they load these.
"""

from __future__ import annotations

from django import template

from facility.billing import quotes, views
from facility.bookings.models import Booking
from facility.people.queries import is_staff

register = template.Library()


@register.inclusion_tag("billing/_month_end_panel.html", takes_context=True)
def month_end_panel(context: template.Context) -> dict:
    """Drafts, finals and problems of the month just ended, for staff."""
    if not is_staff(context.get("user")):
        return {"shown": False}
    return {"shown": True, **quotes.month_end_status(views.last_month())}


@register.simple_tag
def late_cancellation_cost(booking: Booking) -> quotes.Quote | None:
    """What a late cancellation of this booking costs under its tariff (None: no tariff)."""
    return quotes.late_cancellation_quote(booking)
