from __future__ import annotations

from django.urls import path

from facility.logbook import downloads

urlpatterns = [
    path("micrographs/<int:pk>/original", downloads.original, name="micrograph-original"),
    path("micrographs/<int:pk>/thumbnail", downloads.thumbnail, name="micrograph-thumbnail"),
]
