"""The upload step shared by the session and the instrument upload endpoints."""

from __future__ import annotations

from django.conf import settings
from rest_framework import status
from rest_framework.request import Request
from rest_framework.response import Response

from api.models import TokenKind
from api.permissions import token_of
from api.serializers.micrographs import MicrographOut, MicrographUploadIn
from facility.errors import TooLarge
from facility.logbook.models import InstrumentSession
from facility.logbook.uploads import upload_micrograph

# Room for the multipart envelope and the condition fields around the file.
ENVELOPE_BYTES = 1024 * 1024


def refuse_oversized(request: Request) -> None:
    """Refuse by the declared length before reading the body, so a huge upload is not received."""
    try:
        declared = int(request.META.get("CONTENT_LENGTH") or 0)
    except ValueError:
        declared = 0
    limit = settings.UPLOAD_MAX_BYTES
    if declared > limit + ENVELOPE_BYTES:
        raise TooLarge(
            f"The upload is {declared / 1e6:.0f} MB; the limit is {limit / 1e6:.0f} MB per file."
        )


def upload(view, request: Request, session: InstrumentSession) -> Response:
    """Attach the posted file to `session`: 201 for a new micrograph, 200 for the same bytes again."""
    refuse_oversized(request)
    data = view.parse(MicrographUploadIn)
    file = data.pop("file")
    token = token_of(request)
    micrograph, created = upload_micrograph(
        session=session,
        by=request.user,
        upload=file,
        original_name=file.name or "",
        conditions={k: v for k, v in data.items() if v not in (None, "")},
        # The session queryset was already narrowed to the token's instrument.
        instrument_pc=bool(token and token.kind == TokenKind.INSTRUMENT),
    )
    return Response(
        view.out(MicrographOut, micrograph),
        status=status.HTTP_201_CREATED if created else status.HTTP_200_OK,
    )
