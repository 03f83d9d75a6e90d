"""Pages about the signed-in person: their messages."""

from __future__ import annotations

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.http import HttpRequest, HttpResponse
from django.shortcuts import redirect, render
from django.views.decorators.http import require_GET, require_POST

from facility.people.models import Notification
from facility.people.services import mark_read


@login_required
@require_GET
def notification_list(request: HttpRequest) -> HttpResponse:
    notes = list(Notification.objects.filter(user=request.user)[:100])
    return render(
        request,
        "people/notification_list.html",
        {"notes": notes, "unread": [n for n in notes if n.read_at is None], "nav": "notifications"},
    )


@login_required
@require_POST
def notification_read(request: HttpRequest) -> HttpResponse:
    count = mark_read(user=request.user)
    messages.success(request, f"{count} message{'s' if count != 1 else ''} marked as read.")
    return redirect("notification-list")
