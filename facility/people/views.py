"""Pages about the signed-in person: their messages."""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.http import HttpRequest, HttpResponse
from django.shortcuts import render
from django.views.decorators.http import require_GET

from facility.people.models import Notification


@login_required
@require_GET
def notification_list(request: HttpRequest) -> HttpResponse:
    notes = list(Notification.objects.filter(user=request.user)[:100])
    return render(
        request,
        "people/notification_list.html",
        {"notes": notes, "unread": [n for n in notes if n.read_at is None], "nav": "notifications"},
    )
