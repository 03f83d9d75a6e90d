"""Upkeep panels that other apps' pages show: an instrument's counters, the open alerts.

The instrument page and the staff overview belong to the logbook, which must not import upkeep
(DESIGN.md: apps import only those to their left). The template layer sits above every app, so
those pages load these tags instead; each tag checks the upkeep rule (staff only) itself.
"""

from __future__ import annotations

from django import template

from facility.instruments.models import Instrument
from facility.people.queries import is_staff
from facility.upkeep import queries
from facility.upkeep.views import instrument_rows

register = template.Library()

HOME_ALERTS = 10


@register.inclusion_tag("upkeep/_counters_panel.html", takes_context=True)
def upkeep_counters(context: template.Context, instrument: Instrument) -> dict:
    """The instrument's counters against their limits, for staff; nothing for anyone else."""
    user = context.get("user")
    if not is_staff(user):
        return {"shown": False}
    return {"shown": True, "instrument": instrument, "rows": instrument_rows(instrument)}


@register.inclusion_tag("upkeep/_alerts_panel.html", takes_context=True)
def upkeep_alerts(context: template.Context) -> dict:
    """Open upkeep alerts (not acknowledged, part not yet changed), for the staff overview."""
    user = context.get("user")
    if not is_staff(user):
        return {"shown": False}
    alerts = list(queries.open_alerts()[: HOME_ALERTS + 1])
    return {
        "shown": True,
        "alerts": alerts[:HOME_ALERTS],
        "more": len(alerts) > HOME_ALERTS,
        "csrf_token": context.get("csrf_token"),
        "next": context.get("request").path if context.get("request") else "",
    }
