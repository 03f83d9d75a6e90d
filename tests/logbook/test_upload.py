"""Uploads: content checks and budgets before anything is stored; same bytes, same micrograph."""

from __future__ import annotations

import datetime as dt

import pytest
from django.core.files.storage import default_storage

from facility.errors import Closed, Invalid, NotAllowed, TooLarge, UnsupportedType
from facility.logbook.models import AnalysisState, Micrograph
from facility.logbook.uploads import storage_name, upload_micrograph
from tests import factories as f
from tests.logbook import images


@pytest.fixture
def session(facility):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        ended_at=None,
        beam_on_hours=None,
    )


def _stored_files() -> list[str]:
    try:
        dirs, files = default_storage.listdir("micrographs")
    except FileNotFoundError:
        return []
    found = list(files)
    for d in dirs:
        for sub in default_storage.listdir(f"micrographs/{d}")[0]:
            found += default_storage.listdir(f"micrographs/{d}/{sub}")[1]
    return found


def test_upload_stores_under_the_hash_and_analyses(session, facility, upload):
    data = images.tiff_bytes(images.clean())
    micrograph, created = upload(session, facility.researcher_a, data, "cell 7 final.tif")
    assert created
    assert micrograph.file.name == storage_name(micrograph.sha256, "tiff")
    assert "cell 7" not in micrograph.file.name  # the user's name is kept only as a field
    assert micrograph.original_name == "cell 7 final.tif"
    assert micrograph.state == AnalysisState.DONE, micrograph.failure_reason
    assert micrograph.assessments.count() == 1
    assert default_storage.exists(micrograph.thumbnail.name)
    assert (micrograph.width, micrograph.height, micrograph.bit_depth) == (384, 384, 16)


def test_same_bytes_twice_is_one_micrograph(session, facility):
    data = images.tiff_bytes(images.clean())
    first, created_first = upload_micrograph(
        session=session, by=facility.researcher_a, upload=images.upload(data)
    )
    again, created_again = upload_micrograph(
        session=session, by=facility.researcher_a, upload=images.upload(data, "copy.tif")
    )
    assert created_first and not created_again
    assert first.pk == again.pk
    assert Micrograph.objects.count() == 1
    assert len(_stored_files()) == 1


@pytest.mark.parametrize(
    ("data", "error", "fragment"),
    [
        (b"", Invalid, "empty"),
        (b"%PDF-1.7 not an image at all", UnsupportedType, "not a TIFF, PNG or JPEG"),
        (b"II*\x00" + b"\xff" * 40, Invalid, "cannot be read"),
        (b"\x89PNG\r\n\x1a\n" + b"\x00" * 10, Invalid, "cannot be read"),
    ],
)
def test_bad_files_are_refused_and_leave_nothing(session, facility, data, error, fragment):
    with pytest.raises(error, match=fragment):
        upload_micrograph(session=session, by=facility.researcher_a, upload=images.upload(data))
    assert Micrograph.objects.count() == 0
    assert _stored_files() == []


def test_name_does_not_decide_the_type(session, facility):
    # A PNG named .tif is accepted as the PNG it is.
    data = images.png_bytes(images.clean(bit_depth=8))
    micrograph, _ = upload_micrograph(
        session=session, by=facility.researcher_a, upload=images.upload(data, "looks.tif")
    )
    assert micrograph.content_type == "image/png"
    assert micrograph.file.name.endswith(".png")


def test_pixel_budget_is_checked_from_the_header(session, facility, settings):
    settings.UPLOAD_MAX_PIXELS = 100_000  # 384 × 384 = 147 456 pixels
    with pytest.raises(TooLarge, match="megapixels"):
        upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    assert Micrograph.objects.count() == 0 and _stored_files() == []


def test_byte_budget(session, facility, settings):
    settings.UPLOAD_MAX_BYTES = 1000
    with pytest.raises(TooLarge, match="the limit is"):
        upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    assert _stored_files() == []


def test_other_researcher_cannot_upload(session, facility):
    with pytest.raises(NotAllowed):
        upload_micrograph(
            session=session,
            by=facility.researcher_b,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    assert _stored_files() == []


def test_long_closed_session_refuses_the_operator_but_not_staff(facility, upload):
    old = f.InstrumentSessionFactory(
        instrument=facility.sem, operator=facility.researcher_a, account=facility.account_a
    )
    # a fixed evening, not "now" moved back: replacing the hour broke between 02:00 and 03:00
    old.started_at = dt.datetime(2020, 12, 1, 18, 0, tzinfo=dt.UTC)
    old.ended_at = old.started_at + dt.timedelta(hours=5)
    old.save()
    data = images.tiff_bytes(images.clean())
    with pytest.raises(Closed, match="checked out"):
        upload_micrograph(session=old, by=facility.researcher_a, upload=images.upload(data))
    micrograph, _ = upload(old, facility.manager, data)
    assert micrograph.state == "done"


def test_out_of_range_logged_conditions_refuse_the_upload(session, facility):
    with pytest.raises(Invalid, match="out of range"):
        upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
            conditions={"accelerating_voltage_kv": 900},
        )
    assert Micrograph.objects.count() == 0 and _stored_files() == []


def test_analysis_waits_for_the_commit(session, facility, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=False) as callbacks:
        micrograph, _ = upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
    assert len(callbacks) == 1
    micrograph.refresh_from_db()
    assert micrograph.state == AnalysisState.PENDING
    callbacks[0]()
    micrograph.refresh_from_db()
    assert micrograph.state == AnalysisState.DONE


def test_rollback_enqueues_nothing(session, facility, django_capture_on_commit_callbacks):
    from django.db import transaction

    with (
        django_capture_on_commit_callbacks(execute=True) as callbacks,
        pytest.raises(RuntimeError),
        transaction.atomic(),
    ):
        upload_micrograph(
            session=session,
            by=facility.researcher_a,
            upload=images.upload(images.tiff_bytes(images.clean())),
        )
        raise RuntimeError("the caller changes its mind")
    assert callbacks == []
    assert Micrograph.objects.count() == 0
