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

    def get_ordering(self, request, queryset, view) -> tuple[str, ...]:
        # DRF takes the view's ordering only through an OrderingFilter; lists without one (the
        # instrument catalogue, accounts, tokens) keep their own order too.
        if not any(hasattr(b, "get_ordering") for b in getattr(view, "filter_backends", [])):
            ordering = getattr(view, "ordering", None) or self.ordering
            return (ordering,) if isinstance(ordering, str) else tuple(ordering)
        return super().get_ordering(request, queryset, view)
