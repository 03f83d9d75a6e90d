"""Celery jobs for billing. They take plain values, call a service, and return a summary.

`draft_previous_month` runs from beat on the 1st of each month (settings.CELERY_BEAT_SCHEDULE):
it drafts last month's statements and tells staff once. Finalising stays a person's act.
Running it twice is harmless: drafts are regenerated and staff are not told again.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from celery import shared_task
from django.utils import timezone

from facility.billing import services
from facility.billing.months import first_of, parse_month, previous_month


@shared_task(
    name="facility.billing.tasks.draft_previous_month", soft_time_limit=1500, time_limit=1800
)
def draft_previous_month(today: str | None = None) -> dict[str, Any]:
    """Draft the statements of the month before `today` (ISO date; default: today, local)."""
    day = dt.date.fromisoformat(today) if today else timezone.localdate()
    run = services.draft_month(month=previous_month(first_of(day)), tell_staff=True)
    return run.as_dict()


@shared_task(name="facility.billing.tasks.draft_month", soft_time_limit=1500, time_limit=1800)
def draft_month(month: str) -> dict[str, Any]:
    """Draft the statements of `month` ('YYYY-MM') on demand, without a staff message."""
    return services.draft_month(month=parse_month(month)).as_dict()
