"""URLs of the REST API, mounted at /api/v1/ (namespace "api").

Each resource registers its viewset here. Anything else under /api/v1/ answers a JSON 404, never an HTML page.
"""

from __future__ import annotations

from django.urls import path, re_path
from django.views.decorators.cache import cache_page
from drf_spectacular.views import SpectacularAPIView, SpectacularSwaggerView
from rest_framework.routers import SimpleRouter

from api.views import (
    billing,
    bookings,
    conditions,
    flags,
    instruments,
    micrographs,
    people,
    sessions,
    specimens,
    tokens,
    upkeep,
)
from api.views.fallback import not_found, with_slash

app_name = "api"
SCHEMA_CACHE_SECONDS = 600

router = SimpleRouter()
router.register("instruments", instruments.InstrumentViewSet, basename="instrument")
router.register("bookings", bookings.BookingViewSet, basename="booking")
router.register("sessions", sessions.SessionViewSet, basename="session")
router.register("micrographs", micrographs.MicrographViewSet, basename="micrograph")
router.register("flags", flags.FlagViewSet, basename="flag")
router.register("specimens", specimens.SpecimenViewSet, basename="specimen")
router.register("accounts", people.AccountViewSet, basename="account")
router.register("tokens", tokens.TokenViewSet, basename="token")
router.register("conditions", conditions.ConditionsViewSet, basename="conditions")
# Upkeep (staff only), per instrument; the instrument code is part of the path.
UPKEEP_INSTRUMENT = r"upkeep/instruments/(?P<code>[^/]+)"
router.register("upkeep/instruments", upkeep.UpkeepInstrumentViewSet, basename="upkeep-instrument")
router.register(
    f"{UPKEEP_INSTRUMENT}/service-events", upkeep.ServiceEventViewSet, basename="service-event"
)
router.register(
    f"{UPKEEP_INSTRUMENT}/meter-readings", upkeep.MeterReadingViewSet, basename="meter-reading"
)
router.register(f"{UPKEEP_INSTRUMENT}/limits", upkeep.LimitViewSet, basename="limit")
router.register("upkeep/alerts", upkeep.AlertViewSet, basename="alert")
# Billing: statements (scoped by billing's visible_to), lines, adjustments, the usage report.
router.register("billing/statements", billing.StatementViewSet, basename="statement")
router.register("billing/lines", billing.LineViewSet, basename="line")
router.register("billing/adjustments", billing.AdjustmentViewSet, basename="adjustment")
router.register("billing/usage", billing.UsageViewSet, basename="usage")

urlpatterns = [
    # The schema changes only with a deploy; generating it takes most of a second.
    path("schema/", cache_page(SCHEMA_CACHE_SECONDS)(SpectacularAPIView.as_view()), name="schema"),
    path("docs/", SpectacularSwaggerView.as_view(url_name="api:schema"), name="api-docs"),
    path("me/", people.MeView.as_view(), name="me"),
    *router.urls,
    path("conditions/search", with_slash, name="conditions-search-no-slash"),
    re_path(r"^.*$", not_found, name="not-found"),
]
