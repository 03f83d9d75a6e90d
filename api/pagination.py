"""Cursor pagination: stable pages while rows are added (an acquisition PC keeps uploading).

A cursor page costs one query (page size + 1 rows) and no COUNT, so lists stay cheap as they grow.
"""

from __future__ import annotations

from rest_framework.pagination import CursorPagination


class Cursor(CursorPagination):
    page_size = 50
    page_size_query_param = "page_size"
    max_page_size = 500
    # Each view sets its own `ordering`; this is the fallback.
    ordering = "-id"
