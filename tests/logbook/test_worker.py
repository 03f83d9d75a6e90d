"""End to end with a real Celery worker consuming from Redis: upload → analysis → flags."""

from __future__ import annotations

import time

import pytest
from celery.contrib.testing.worker import start_worker

from facility.celery import app
from facility.logbook.models import AnalysisState
from facility.logbook.uploads import upload_micrograph
from tests import factories as f
from tests.logbook import images


@pytest.mark.redis
@pytest.mark.django_db(transaction=True)
def test_upload_to_flags_through_a_real_worker(facility):
    assert not app.conf.task_always_eager, "this test needs a broker, not in-process jobs"
    session = f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        ended_at=None,
        beam_on_hours=None,
    )
    with start_worker(app, pool="solo", perform_ping_check=False, shutdown_timeout=30):
        micrograph, created = upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.charged())),
        )
        assert created
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline:
            micrograph.refresh_from_db()
            if micrograph.state != AnalysisState.PENDING:
                break
            time.sleep(0.2)
    assert micrograph.state == AnalysisState.DONE, micrograph.failure_reason
    assert session.flags.filter(code="charging").exists()
