"""Top-level routes: the admin, the API, the pages, and the micrograph downloads."""

from __future__ import annotations

from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path

from api import token_pages as api_tokens
from facility.billing import views as billing
from facility.bookings import views as bookings
from facility.finder import views as finder
from facility.logbook.views import home, instruments, session, station
from facility.people import views as people
from facility.upkeep import views as upkeep

pages = [
    path("", home.home, name="home"),
    path(
        "sign-in/",
        auth_views.LoginView.as_view(redirect_authenticated_user=True),
        name="login",
    ),
    path("sign-out/", auth_views.LogoutView.as_view(), name="logout"),
    path("messages/", people.notification_list, name="notification-list"),
    path("messages/read/", people.notification_read, name="notification-read"),
    # Instruments, their week calendars and the check-in station at each microscope.
    path("instruments/", instruments.instrument_list, name="instrument-list"),
    path("instruments/<slug:code>/", instruments.instrument_detail, name="instrument-detail"),
    path("instruments/<slug:code>/book/", bookings.new_booking, name="booking-new"),
    path("instruments/<slug:code>/station/", station.station, name="station"),
    path("instruments/<slug:code>/check-in/", station.check_in, name="check-in"),
    # Bookings.
    path("bookings/", bookings.booking_list, name="booking-list"),
    path("bookings/<int:pk>/", bookings.booking_detail, name="booking-detail"),
    path("bookings/<int:pk>/cancel/", bookings.cancel_booking, name="booking-cancel"),
    path("bookings/<int:pk>/confirm/", bookings.confirm_booking, name="booking-confirm"),
    path("bookings/<int:pk>/no-show/", bookings.no_show, name="booking-no-show"),
    # Private calendar feeds: the token in the URL is the only credential (no sign-in).
    path("calendar/", bookings.calendar_feeds, name="calendar-feeds"),
    path("calendar/<str:token>/bookings.ics", bookings.personal_feed, name="feed-personal"),
    path(
        "calendar/<str:token>/instruments/<slug:code>.ics",
        bookings.instrument_feed,
        name="feed-instrument",
    ),
    # The session page (flag notifications link to /sessions/<pk>/) and its forms.
    path("sessions/<int:pk>/", session.session_detail, name="session-detail"),
    path("sessions/<int:pk>/live/", session.session_live, name="session-live"),
    path("sessions/<int:pk>/check-out/", station.check_out, name="check-out"),
    path("sessions/<int:pk>/specimen/", session.session_specimen, name="session-specimen"),
    path("sessions/<int:pk>/coating/", session.session_coating, name="session-coating"),
    path("sessions/<int:pk>/settings/", session.session_settings, name="session-settings"),
    path("sessions/<int:pk>/conditions/", session.session_conditions, name="session-conditions"),
    path("sessions/<int:pk>/fault/", session.session_fault, name="session-fault"),
    path("sessions/<int:pk>/images/", session.session_upload, name="session-upload"),
    path("flags/<int:pk>/dismiss/", session.flag_dismiss, name="flag-dismiss"),
    # The finder: search, start a session from its suggestion, thumbnails of shared hits.
    path("finder/", finder.finder, name="finder"),
    path("finder/start/", finder.start_from_suggestion, name="finder-start"),
    path("finder/thumbnails/<int:pk>", finder.hit_thumbnail, name="finder-thumbnail"),
    path("finder/charging/", finder.charging, name="charging-report"),
    # Upkeep (staff): counters, charts, service events, meter readings, limits, alerts, audit.
    path("upkeep/", upkeep.overview, name="upkeep"),
    path("upkeep/alerts/<int:pk>/acknowledge/", upkeep.acknowledge_alert, name="upkeep-alert-ack"),
    path("upkeep/<slug:code>/", upkeep.instrument_upkeep, name="upkeep-instrument"),
    path("upkeep/<slug:code>/chart.svg", upkeep.counter_chart, name="upkeep-chart"),
    path(
        "upkeep/<slug:code>/service-events/",
        upkeep.record_service_event,
        name="upkeep-service-event",
    ),
    path(
        "upkeep/<slug:code>/meter-readings/",
        upkeep.record_meter_reading,
        name="upkeep-meter-reading",
    ),
    path("upkeep/<slug:code>/limits/", upkeep.set_limit, name="upkeep-limit"),
    path("upkeep/<slug:code>/audit/", upkeep.audit_export, name="upkeep-audit"),
    # API tokens: one's own; staff also issue instrument-PC tokens and stop anyone's.
    path("tokens/", api_tokens.token_list, name="api-tokens"),
    path("tokens/new/", api_tokens.create_token, name="api-token-create"),
    path(
        "tokens/new-instrument-pc/",
        api_tokens.create_instrument_token,
        name="api-token-create-instrument",
    ),
    path("tokens/<int:pk>/revoke/", api_tokens.revoke_token, name="api-token-revoke"),
    # Billing: statements (staff, finance, group leaders), finalising, exports, usage.
    path("statements/", billing.statement_list, name="statement-list"),
    path("statements/draft/", billing.draft_month, name="statement-draft-month"),
    path("statements/export.csv", billing.month_export, name="statement-month-export"),
    path("statements/<int:pk>/", billing.statement_detail, name="statement-detail"),
    path("statements/<int:pk>/finalise/", billing.finalise, name="statement-finalise"),
    path("statements/<int:pk>/statement.csv", billing.statement_csv, name="statement-csv"),
    path("statements/<int:pk>/statement.pdf", billing.statement_pdf_download, name="statement-pdf"),
    path(
        "statements/<int:pk>/adjustments/",
        billing.add_adjustment,
        name="statement-adjustment-add",
    ),
    path(
        "statements/<int:pk>/adjustments/<int:line>/remove/",
        billing.remove_adjustment,
        name="statement-adjustment-remove",
    ),
    path("usage/", billing.usage_report, name="usage-report"),
    path("usage/<slug:kind>.svg", billing.usage_chart, name="usage-chart"),
    path("usage/<slug:what>.csv", billing.usage_export, name="usage-export"),
]

urlpatterns = [
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
    path("", include("facility.logbook.urls")),
    *pages,
]
