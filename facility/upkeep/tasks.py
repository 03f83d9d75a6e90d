"""Celery tasks for upkeep. Thin: each calls one service."""

from __future__ import annotations

from celery import shared_task

from facility.upkeep import services


@shared_task(name="facility.upkeep.tasks.check_limits", soft_time_limit=300, time_limit=360)
def check_limits() -> int:
    """Daily (beat): alert staff about counters past their warn level or limit, or forecast to
    reach it soon. Idempotent: a crossing already alerted is not alerted again."""
    return len(services.check_limits())
