"""The JSON 404 for any path under /api/v1/ that names no endpoint, and the slash redirect."""

from __future__ import annotations

from django.http import HttpRequest, HttpResponsePermanentRedirect, JsonResponse
from django.views.decorators.csrf import csrf_exempt

from api.errors import error_body


# Exempt: it changes nothing, and a POST to a wrong path should learn that, not about CSRF.
@csrf_exempt
def not_found(request: HttpRequest) -> JsonResponse:
    return JsonResponse(
        error_body("not_found", f"No API endpoint at {request.path}; see /api/v1/docs/."),
        status=404,
    )


@csrf_exempt
def with_slash(request: HttpRequest) -> HttpResponsePermanentRedirect:
    """The issue names `/api/v1/conditions/search`; every endpoint here ends in a slash, so the
    form without one is sent on to it, query string kept."""
    query = request.META.get("QUERY_STRING", "")
    # 308 (RFC 9110 §15.4.9), not 301: the client repeats the same method with the same body.
    return HttpResponsePermanentRedirect(
        f"{request.path}/" + (f"?{query}" if query else ""), preserve_request=True
    )
