"""The JSON 404 for any path under /api/v1/ that names no endpoint."""

from __future__ import annotations

from django.http import HttpRequest, JsonResponse
from django.views.decorators.csrf import csrf_exempt

from api.errors import error_body


# Exempt: it changes nothing, and a POST to a wrong path should learn that, not about CSRF.
@csrf_exempt
def not_found(request: HttpRequest) -> JsonResponse:
    return JsonResponse(
        error_body("not_found", f"No API endpoint at {request.path}; see /api/v1/docs/."),
        status=404,
    )
