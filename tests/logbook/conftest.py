from __future__ import annotations

import pytest

from facility.logbook.uploads import upload_micrograph
from tests.logbook import images


@pytest.fixture
def upload(django_capture_on_commit_callbacks):
    """Upload as a request would: the analysis runs when the transaction commits."""

    def run(session, by, data: bytes, name: str = "image.tif", **kw):
        with django_capture_on_commit_callbacks(execute=True):
            micrograph, created = upload_micrograph(
                session=session, by=by, upload=images.upload(data, name), **kw
            )
        micrograph.refresh_from_db()
        return micrograph, created

    return run
