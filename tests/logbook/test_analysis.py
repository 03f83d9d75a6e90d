"""The analysis job: metadata into conditions, mismatches, failures, idempotency, re-queueing."""

from __future__ import annotations

import datetime as dt

import pytest
from django.core.management import call_command
from django.utils import timezone

from facility.logbook import tasks
from facility.logbook.models import AnalysisState, Assessment, Flag, Micrograph
from facility.logbook.services import add_conditions
from facility.logbook.uploads import upload_micrograph
from tests import factories as f
from tests.logbook import images

TEXT_BLOCK = "[Beam]\nHV = 15 kV\nWD: 7.5 mm\nPixel size = 2.5 nm\nDetector = SE2\n"


@pytest.fixture
def session(facility):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        ended_at=None,
        beam_on_hours=None,
    )


def test_embedded_settings_fill_the_blanks_and_disagreements_are_flagged(upload, session, facility):
    add_conditions(session=session, by=facility.researcher_a, accelerating_voltage_kv=5)
    data = images.tiff_bytes(images.clean(), description=TEXT_BLOCK)
    micrograph, _ = upload(session, facility.researcher_a, data)
    assert micrograph.state == AnalysisState.DONE, micrograph.failure_reason
    conditions = micrograph.conditions
    assert conditions.working_distance_mm == pytest.approx(
        7.5
    )  # filled: the operator left it blank
    assert conditions.accelerating_voltage_kv == 5  # the logged value is not overwritten
    assert micrograph.pixel_size_nm == pytest.approx(2.5)
    assert micrograph.pixel_size_source == "text-block"
    flag = session.flags.get(code="metadata_mismatch")
    assert "accelerating voltage kv logged 5" in flag.message
    assert "15" in flag.message


def test_no_logged_conditions_creates_them_from_the_image(upload, session, facility):
    data = images.tiff_bytes(images.clean(), description=TEXT_BLOCK)
    micrograph, _ = upload(session, facility.researcher_a, data)
    assert micrograph.conditions.source == "image"
    assert micrograph.conditions.accelerating_voltage_kv == pytest.approx(15)
    assert not session.flags.filter(code="metadata_mismatch").exists()


def test_corrupt_pixels_end_as_failed_with_the_reason(upload, session, facility):
    # A deflate-compressed TIFF whose compressed stream is damaged: the header and directory are
    # sound (so the upload checks pass), the pixels cannot be decoded.
    data = bytearray(images.tiff_bytes(images.clean(), compression="zlib"))
    middle = len(data) // 2
    data[middle : middle + 64] = b"\x00" * 64
    micrograph, _ = upload(session, facility.researcher_a, bytes(data))
    assert micrograph.state == AnalysisState.FAILED
    assert "Unreadable image" in micrograph.failure_reason


def test_running_the_job_twice_changes_nothing(upload, session, facility):
    micrograph, _ = upload(session, facility.researcher_a, images.tiff_bytes(images.charged()))
    before_flags = list(session.flags.values_list("id", "code", "message"))
    before = Assessment.objects.get(micrograph=micrograph)
    assert tasks.analyse_micrograph.delay(micrograph.pk).get() == "done"
    after = Assessment.objects.get(micrograph=micrograph)
    assert (before.pk, before.created_at) == (after.pk, after.created_at)
    assert list(session.flags.values_list("id", "code", "message")) == before_flags


def test_stale_pending_micrographs_are_queued_again(
    session, facility, django_capture_on_commit_callbacks
):
    with django_capture_on_commit_callbacks(execute=False):
        micrograph, _ = upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    # The message was lost: still pending half an hour later.
    Micrograph.objects.filter(pk=micrograph.pk).update(
        uploaded_at=timezone.now() - dt.timedelta(minutes=30)
    )
    assert tasks.requeue_stale_micrographs.delay().get() == 1
    micrograph.refresh_from_db()
    assert micrograph.state == AnalysisState.DONE


def test_repeat_offenders_end_as_failed(
    session, facility, settings, django_capture_on_commit_callbacks
):
    with django_capture_on_commit_callbacks(execute=False):
        micrograph, _ = upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    Micrograph.objects.filter(pk=micrograph.pk).update(
        analysis_attempts=settings.ANALYSIS_MAX_ATTEMPTS,
        uploaded_at=timezone.now() - dt.timedelta(hours=2),
    )
    assert tasks.requeue_stale_micrographs.delay().get() == 0
    micrograph.refresh_from_db()
    assert micrograph.state == AnalysisState.FAILED
    assert "too many times" in micrograph.failure_reason


def test_reanalyse_command(upload, session, facility, capsys):
    upload(session, facility.researcher_a, images.tiff_bytes(images.clean()))
    call_command("reanalyse", "--session", str(session.pk))
    assert (
        "Reanalysed 1 micrographs in 1 sessions: 1 analysed, 0 failed." in capsys.readouterr().out
    )
    assert Assessment.objects.count() == 1  # same version: updated, not duplicated


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--session", "999999"], "No instrument session with id 999999"),
        (["--instrument", "nope"], "No instrument with code 'nope'"),
        (["--since", "last tuesday"], "is not a date"),
    ],
)
def test_reanalyse_refuses_bad_input(db, args, message):
    from django.core.management.base import CommandError

    with pytest.raises(CommandError, match=message):
        call_command("reanalyse", *args)


def test_flags_are_never_appended_twice(upload, session, facility):
    upload(session, facility.researcher_a, images.tiff_bytes(images.charged(seed=5)))
    upload(session, facility.researcher_a, images.tiff_bytes(images.charged(seed=6)))
    assert Flag.objects.filter(session=session, code="charging").count() == 1


def test_charging_images_notify_the_operator_once(upload, session, facility, mailoutbox):
    from facility.people.models import Notification

    micrograph, _ = upload(session, facility.researcher_a, images.tiff_bytes(images.charged()))
    flag = session.flags.get(code="charging")
    assert flag.severity == "problem"
    assert "Charging in 1 of 1 images" in flag.message
    assert any("accelerating voltage" in r or "probe current" in r for r in flag.remedies)
    note = Notification.objects.get(user=facility.researcher_a)
    assert "Charging" in note.subject
    assert len(mailoutbox) == 1 and mailoutbox[0].to == [facility.researcher_a.email]
    tasks.analyse_micrograph.delay(micrograph.pk)
    call_command("reanalyse", "--session", str(session.pk))
    assert Notification.objects.filter(user=facility.researcher_a).count() == 1
