"""Accepting micrographs: content checks, budgets, storage under the file's SHA-256.

Every check runs before anything is stored, so a refused upload leaves nothing behind. The file
is read by content (magic bytes and a header-only probe), never judged by its name.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import logging
from typing import IO, Any

from django.conf import settings
from django.contrib.auth.models import AbstractBaseUser
from django.core.files import File
from django.core.files.storage import default_storage
from django.db import IntegrityError, transaction
from django.utils import timezone

from facility.errors import Closed, Invalid, NotAllowed, TooLarge, UnsupportedType
from facility.logbook.models import Conditions, InstrumentSession, Micrograph
from facility.logbook.services import clean_condition_values
from facility.micrograph.read import ImageReadError, file_type, probe
from facility.people.queries import is_staff

log = logging.getLogger(__name__)

EXTENSIONS = {"tiff": "tif", "png": "png", "jpeg": "jpg"}
CONTENT_TYPES = {"tiff": "image/tiff", "png": "image/png", "jpeg": "image/jpeg"}
CHUNK = 1024 * 1024


def storage_name(sha256: str, fmt: str) -> str:
    """Where the original lives: content-addressed, never the user's file name."""
    return f"micrographs/{sha256[:2]}/{sha256[2:4]}/{sha256}.{EXTENSIONS[fmt]}"


def _size_of(upload: IO[bytes]) -> int:
    size = getattr(upload, "size", None)
    if size is None:
        position = upload.tell()
        upload.seek(0, 2)
        size = upload.tell()
        upload.seek(position)
    return int(size)


def _sha256(upload: IO[bytes]) -> str:
    digest = hashlib.sha256()
    upload.seek(0)
    while chunk := upload.read(CHUNK):
        digest.update(chunk)
    upload.seek(0)
    return digest.hexdigest()


def may_upload(session: InstrumentSession, by: AbstractBaseUser) -> bool:
    return session.operator_id == by.id or is_staff(by)


def check_upload(upload: IO[bytes], original_name: str = ""):
    """Size, type and pixel-budget checks. Returns the image header; refuses with a domain error."""
    size = _size_of(upload)
    if size == 0:
        raise Invalid(f"{original_name or 'The file'} is empty.")
    if size > settings.UPLOAD_MAX_BYTES:
        raise TooLarge(
            f"{original_name or 'The file'} is {size / 1e6:.0f} MB; the limit is "
            f"{settings.UPLOAD_MAX_BYTES / 1e6:.0f} MB."
        )
    upload.seek(0)
    head = upload.read(8)
    upload.seek(0)
    # the type alone first: a file of another kind is 415, a broken image of ours 400
    if file_type(head) is None:
        raise UnsupportedType(
            f"{original_name or 'The file'} is not a TIFF, PNG or JPEG image (judged by its content)."
        )
    try:
        header = probe(upload)
    except ImageReadError as exc:
        raise Invalid(f"{original_name or 'The file'} cannot be read as an image: {exc}") from None
    finally:
        upload.seek(0)
    pixels = header.width * header.height * max(header.samples, 1) * max(header.pages, 1)
    if pixels > settings.UPLOAD_MAX_PIXELS:
        raise TooLarge(
            f"{original_name or 'The image'} holds {pixels / 1e6:.0f} megapixels "
            f"({header.width} × {header.height} × {header.samples} samples × {header.pages} pages); "
            f"the limit is {settings.UPLOAD_MAX_PIXELS / 1e6:.0f}."
        )
    return header


def upload_micrograph(
    *,
    session: InstrumentSession,
    by: AbstractBaseUser,
    upload: IO[bytes],
    original_name: str = "",
    conditions: dict[str, Any] | None = None,
    instrument_pc: bool = False,
) -> tuple[Micrograph, bool]:
    """Attach an image to a session. Returns (micrograph, created).

    The same bytes uploaded twice to a session give the same micrograph (created False). Analysis
    is queued when the transaction commits. `conditions`, when given, are the settings the
    operator logged for this image; the analysis fills the ones they left blank from the file.
    `instrument_pc` is set by the API for a staff-issued token of the session's instrument.
    """
    if not (may_upload(session, by) or instrument_pc):
        raise NotAllowed("Only the session's operator or facility staff can add images to it.")
    if not accepts_uploads_from(session, by):
        raise Closed("This session is checked out; ask staff to add late images.")
    original_name = original_name or str(getattr(upload, "name", "") or "")
    cleaned = clean_condition_values(conditions or {})
    header = check_upload(upload, original_name)
    digest = _sha256(upload)
    existing = Micrograph.objects.filter(session=session, sha256=digest).first()
    if existing is not None:
        return existing, False
    name = storage_name(digest, header.format)
    if not default_storage.exists(name):
        saved = default_storage.save(name, File(upload, name=name))
        if saved != name:  # another upload of the same bytes won the race; keep one copy
            default_storage.delete(saved)
    try:
        with transaction.atomic():
            logged = None
            if cleaned:
                logged = Conditions.objects.create(session=session, **cleaned)
            micrograph = Micrograph.objects.create(
                session=session,
                conditions=logged,
                file=name,
                sha256=digest,
                original_name=(original_name or "")[:255],
                content_type=CONTENT_TYPES[header.format],
                size_bytes=_size_of(upload),
                width=header.width,
                height=header.height,
                pages=header.pages,
                bit_depth=header.bit_depth,
                uploaded_by=by,
            )
            transaction.on_commit(lambda: _enqueue(micrograph.pk))
    except IntegrityError:
        existing = Micrograph.objects.filter(session=session, sha256=digest).first()
        if existing is None:
            raise
        return existing, False
    return micrograph, True


# Images taken just before check-out often arrive a few minutes after it (acquisition PCs copy
# in batches); an operator may still add them (common practice, no source).
UPLOAD_GRACE_HOURS = 12


def accepts_uploads_from(session: InstrumentSession, by: AbstractBaseUser) -> bool:
    """Open sessions take images; closed ones for a grace period, and from staff always."""
    if session.ended_at is None or is_staff(by):
        return True
    return timezone.now() - session.ended_at <= dt.timedelta(hours=UPLOAD_GRACE_HOURS)


def _enqueue(micrograph_id: int) -> None:
    from facility.logbook.analysis import mark_failed
    from facility.logbook.tasks import analyse_micrograph

    try:
        analyse_micrograph.delay(micrograph_id)
    except Exception as exc:
        # The upload itself succeeded and is committed: never turn it into an error page.
        log.exception("could not queue or run analysis of micrograph %s", micrograph_id)
        if analyse_micrograph.app.conf.task_always_eager:
            mark_failed(micrograph_id=micrograph_id, reason=f"Analysis crashed: {exc!r}")
        # With a broker, the micrograph stays pending and the periodic job queues it again.
