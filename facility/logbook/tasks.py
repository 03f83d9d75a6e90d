"""Background jobs of the logbook. Each takes ids, loads, and calls a service."""

from __future__ import annotations

import logging

from celery import shared_task
from celery.exceptions import SoftTimeLimitExceeded
from django.db import InterfaceError, OperationalError

from facility.logbook import analysis

log = logging.getLogger(__name__)

# Errors worth a retry: the storage or the database was briefly unreachable.
TRANSIENT = (OSError, OperationalError, InterfaceError)
MAX_RETRIES = 5


@shared_task(
    bind=True,
    acks_late=True,
    reject_on_worker_lost=True,
    soft_time_limit=120,
    time_limit=180,
    max_retries=MAX_RETRIES,
)
def analyse_micrograph(self, micrograph_id: int) -> str:
    """Analyse one micrograph; transient errors retry with backoff, the rest end as failed."""
    try:
        return analysis.analyse(micrograph_id=micrograph_id).state
    except analysis.Micrograph.DoesNotExist:
        return "gone"  # deleted since it was queued: nothing to do
    except SoftTimeLimitExceeded:
        analysis.mark_failed(micrograph_id=micrograph_id, reason="Analysis took too long.")
        return "failed"
    except TRANSIENT as exc:
        if self.request.retries >= MAX_RETRIES:
            analysis.mark_failed(
                micrograph_id=micrograph_id, reason=f"Storage or database unavailable: {exc}"
            )
            return "failed"
        raise self.retry(exc=exc, countdown=min(300, 5 * 2**self.request.retries)) from exc


@shared_task(acks_late=True, soft_time_limit=60, time_limit=90)
def requeue_stale_micrographs() -> int:
    """Queue again micrographs whose analysis message was lost; give up on repeat offenders."""
    analysis.give_up_on_repeated_failures()
    ids = analysis.stale_pending_ids()
    for micrograph_id in ids:
        analyse_micrograph.delay(micrograph_id)
    if ids:
        log.info("re-queued %d stale micrographs", len(ids))
    return len(ids)
