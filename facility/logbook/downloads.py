"""Serving originals and thumbnails to the people who may see the session, and no one else."""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.core.files.storage import default_storage
from django.http import FileResponse, Http404, HttpRequest
from django.shortcuts import get_object_or_404
from django.views.decorators.http import require_GET

from facility.logbook.queries import micrographs_visible_to
from facility.logbook.uploads import EXTENSIONS


def original_response(micrograph) -> FileResponse:
    if not micrograph.file:
        raise Http404("This micrograph has no stored file.")
    try:
        handle = default_storage.open(micrograph.file.name, "rb")
    except FileNotFoundError:
        raise Http404("The stored file is missing.") from None
    ext = micrograph.file.name.rsplit(".", 1)[-1]
    stem = micrograph.original_name.rsplit(".", 1)[0] if micrograph.original_name else ""
    filename = f"{stem or micrograph.sha256[:16]}.{ext if ext in EXTENSIONS.values() else 'bin'}"
    response = FileResponse(
        handle, as_attachment=True, filename=filename, content_type=micrograph.content_type
    )
    response["X-Content-Type-Options"] = "nosniff"
    return response


def thumbnail_response(micrograph) -> FileResponse:
    if not micrograph.thumbnail:
        raise Http404("No thumbnail yet: the image has not been analysed.")
    try:
        handle = default_storage.open(micrograph.thumbnail.name, "rb")
    except FileNotFoundError:
        raise Http404("The thumbnail is missing.") from None
    response = FileResponse(handle, content_type="image/png")
    response["X-Content-Type-Options"] = "nosniff"
    response["Cache-Control"] = "private, max-age=3600"
    return response


@require_GET
@login_required
def original(request: HttpRequest, pk: int) -> FileResponse:
    return original_response(get_object_or_404(micrographs_visible_to(request.user), pk=pk))


@require_GET
@login_required
def thumbnail(request: HttpRequest, pk: int) -> FileResponse:
    return thumbnail_response(get_object_or_404(micrographs_visible_to(request.user), pk=pk))
