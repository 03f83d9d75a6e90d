"""In a real browser: book from the calendar, be refused a clash, check in, upload, check out.

Playwright drives the system's Chromium (never a downloaded browser) against pytest-django's live
server. Each step that fails leaves a screenshot under var/test-artifacts/.
"""

from __future__ import annotations

import datetime as dt
import os
import re
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
import time_machine

from tests import factories as f
from tests.conftest import REQUIRE_SERVICES
from tests.logbook import images

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
ARTIFACTS = Path(__file__).resolve().parents[2] / "var" / "test-artifacts"
ZONE = ZoneInfo("Europe/Vienna")
TIMEOUT_MS = 60_000


def _needs(reason: str) -> None:
    if REQUIRE_SERVICES:
        pytest.fail(f"BEAMLEDGER_REQUIRE_SERVICES=1 but this test needs {reason}")
    pytest.skip(f"needs {reason}")


@pytest.fixture
def browser_page(monkeypatch):
    if not CHROMIUM.exists():
        _needs("Chromium at /usr/bin/chromium (apt-get install chromium)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _needs("the playwright Python package")
    # Playwright's sync API runs an event loop in this thread; the test's own ORM calls are
    # still plain synchronous code.
    monkeypatch.setenv("DJANGO_ALLOW_ASYNC_UNSAFE", "true")
    with _connections_closed_after(), sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        # About a 10-inch tablet in landscape, as beside the microscope.
        context = browser.new_context(viewport={"width": 1180, "height": 820}, locale="en-GB")
        page = context.new_page()
        page.set_default_timeout(TIMEOUT_MS)
        try:
            yield page
        finally:
            context.close()
            browser.close()


@contextmanager
def _connections_closed_after() -> Iterator[None]:
    """Close, at the end, the database connections this thread opens meanwhile.

    With Playwright's sync API running, the test body's ORM calls resolve Django's per-context
    connection handler to a wrapper of their own, which the test database teardown does not
    close (on PostgreSQL the database could then not be dropped at the end of the run). The
    live server's connections belong to its own thread and are closed there.
    """
    import threading

    from django.db.backends.signals import connection_created

    me = threading.get_ident()
    opened = []

    def remember(sender, connection, **kwargs) -> None:
        if threading.get_ident() == me:
            opened.append(connection)

    connection_created.connect(remember, weak=False)
    try:
        yield
    finally:
        connection_created.disconnect(remember)
        for conn in opened:
            conn.close()


class Steps:
    """`with steps("name"):` — on failure, a full-page screenshot of that step is kept."""

    def __init__(self, page, test_name: str) -> None:
        self.page = page
        self.test_name = test_name

    @contextmanager
    def __call__(self, name: str) -> Iterator[None]:
        try:
            yield
        except BaseException:
            ARTIFACTS.mkdir(parents=True, exist_ok=True)
            path = ARTIFACTS / f"{self.test_name}-{name}.png"
            try:
                self.page.screenshot(path=str(path), full_page=True)
            except Exception as shot_error:  # the page may be gone; keep the first error
                print(f"could not save a screenshot of {name}: {shot_error}")
            else:
                print(f"screenshot of the failing step: {path}")
            raise


# Every visible control needs a name: a <label>, an aria-label, or (buttons) their text
# (WCAG 2.2, 1.3.1 and 4.1.2).
UNLABELLED = """() => [...document.querySelectorAll('input, select, textarea, button')]
  .filter(el => el.type !== 'hidden' && el.offsetParent !== null)
  .filter(el => !(el.labels && el.labels.length) && !el.getAttribute('aria-label')
                && !(el.tagName === 'BUTTON' && el.textContent.trim()))
  .map(el => el.outerHTML.slice(0, 160))"""
# At 200 % zoom a 1280 px wide window is 640 CSS px: the page must not need sideways scrolling
# (WCAG 2.2, 1.4.10 reflow; the week table scrolls inside its own region, as data tables may).
OVERFLOW = "() => document.documentElement.scrollWidth - window.innerWidth"


def assert_labelled(page) -> None:
    assert page.evaluate(UNLABELLED) == [], page.url


def _next_monday(now: dt.datetime) -> dt.datetime:
    """08:40 on the next Monday: in the future, so browser cookies set then stay valid now."""
    local = now.astimezone(ZONE)
    days = 7 - local.weekday()
    return dt.datetime.combine(local.date() + dt.timedelta(days=days), dt.time(8, 40), ZONE)


def test_book_clash_check_in_upload_check_out(
    live_server, facility, settings, browser_page, tmp_path, request
):
    from playwright.sync_api import expect

    settings.TIME_ZONE = "Europe/Vienna"
    monday = _next_monday(dt.datetime.now(dt.UTC))
    day = f"{monday:%A} {monday.day} {monday:%B}"  # as the calendar's slot labels say it
    iso = f"{monday:%Y-%m-%d}"
    with time_machine.travel(monday, tick=True):
        # Someone else already holds 11:00–12:00 that Monday.
        f.BookingFactory(
            instrument=facility.sem,
            user=facility.researcher_b,
            account=facility.account_b,
            starts_at=monday.replace(hour=11, minute=0),
            ends_at=monday.replace(hour=12, minute=0),
        )
        clean = tmp_path / "clean-field.tif"
        clean.write_bytes(images.tiff_bytes(images.clean()))
        charged = tmp_path / "charged-field.tif"
        charged.write_bytes(images.tiff_bytes(images.charged()))

        page = browser_page
        steps = Steps(page, request.node.name)
        base = live_server.url

        with steps("sign-in"):
            page.goto(f"{base}/sign-in/")
            page.get_by_label("Username").fill("ada.researcher")
            page.get_by_label("Password").fill("correct-horse-42")
            page.get_by_role("button", name="Sign in").click()
            expect(page.get_by_role("heading", level=1)).to_contain_text("Hello")
            assert_labelled(page)

        with steps("book-from-calendar"):
            page.goto(f"{base}/instruments/fe-sem/")
            assert_labelled(page)
            slot = page.get_by_role("link", name=f"Book {day}, 09:00 to 10:00")
            # Keyboard: the arrow key moves to the slot below.
            slot.focus()
            page.keyboard.press("ArrowDown")
            focused = page.evaluate("document.activeElement.getAttribute('aria-label')")
            assert focused == f"Book {day}, 09:30 to 10:30"
            slot.click()
            expect(page.get_by_label("Start")).to_have_value(f"{iso}T09:00")
            expect(page.get_by_label("End")).to_have_value(f"{iso}T10:00")
            assert_labelled(page)
            page.get_by_role("button", name="Book this time").click()
            expect(page.get_by_role("status").first).to_contain_text("Booked Field-emission SEM")
            expect(page.locator("td.block.mine")).to_contain_text("Your booking")

        with steps("clash-refused"):
            page.get_by_role("link", name=f"Book {day}, 10:30 to 11:00").click()
            page.get_by_label("End").fill(f"{iso}T11:30")
            page.get_by_role("button", name="Book this time").click()
            alert = page.get_by_role("alert")
            expect(alert).to_contain_text("already booked for part of")
            expect(alert).to_contain_text("choose a free slot")

        with steps("check-in"):
            page.goto(f"{base}/instruments/fe-sem/station/")
            expect(page.locator("p.state")).to_contain_text("Your booking: 09:00–10:00")
            assert_labelled(page)
            page.get_by_role("button", name="Check in").click()
            expect(page.get_by_role("status").first).to_contain_text("Checked in on")
            expect(page.get_by_role("heading", level=1)).to_contain_text("session of")
            assert_labelled(page)

        with steps("upload-two-images"):
            page.get_by_label("Choose image files").set_input_files([str(clean), str(charged)])
            progress = page.locator("[data-progress] li")
            expect(progress).to_have_count(2)
            expect(progress.nth(0)).to_contain_text("Added; analysing.")
            expect(progress.nth(1)).to_contain_text("Added; analysing.")
            expect(page.locator("#images-live img")).to_have_count(2)
            expect(page.locator("#images-live")).to_have_attribute("data-pending", "0")
            # The thumbnails really load (they are lazy: bring them into view first).
            page.locator("#images-live img").last.scroll_into_view_if_needed()
            page.wait_for_function(
                "[...document.querySelectorAll('#images-live img')]"
                ".every(i => i.complete && i.naturalWidth > 0)"
            )

        with steps("flags-appear"):
            charging = page.locator("#flags-live article.flag", has_text="Charging")
            expect(charging.first).to_be_visible()
            expect(charging.first).to_contain_text("What to change")
            expect(page.locator("#images-live")).to_contain_text("charged-field.tif")
            assert_labelled(page)  # the dismiss forms that arrived with the flags

        with steps("reflow-at-200-percent"):
            session_url = page.url
            page.set_viewport_size({"width": 640, "height": 900})
            for url in [
                session_url,
                f"{base}/",
                f"{base}/instruments/fe-sem/",
                f"{base}/instruments/fe-sem/station/",
                f"{base}/instruments/",
            ]:
                page.goto(url)
                assert page.evaluate(OVERFLOW) <= 0, url
            page.set_viewport_size({"width": 1180, "height": 820})
            page.goto(session_url)

        with steps("check-out"):
            page.get_by_role("button", name="Check out").click()
            expect(page.get_by_role("status").first).to_contain_text(
                re.compile(r"Checked out of Field-emission SEM after \d+ h \d\d min")
            )
            expect(page.locator("#state")).to_contain_text("closed")

    from facility.bookings.models import Booking, BookingState
    from facility.logbook.models import InstrumentSession

    mine = Booking.objects.get(user=facility.researcher_a)
    assert mine.state == BookingState.DONE
    assert Booking.objects.count() == 2  # the clash wrote nothing
    session = InstrumentSession.objects.get()
    assert session.ended_at is not None and session.micrographs.count() == 2
    assert os.path.isdir(settings.MEDIA_ROOT)


def _weekday_of_last_month(now: dt.datetime) -> dt.datetime:
    """09:00 on the first Tuesday of the month before `now`: a month that is over."""
    local = now.astimezone(ZONE)
    first = (local.replace(day=1) - dt.timedelta(days=1)).replace(day=1)
    day = first + dt.timedelta(days=(1 - first.weekday()) % 7)
    return dt.datetime.combine(day.date(), dt.time(9, 0), ZONE)


def test_staff_finalise_a_statement(live_server, facility, settings, browser_page, request):
    from playwright.sync_api import expect

    from facility.billing import services
    from facility.billing.models import Statement, StatementState

    settings.TIME_ZONE = "Europe/Vienna"
    start = _weekday_of_last_month(dt.datetime.now(dt.UTC))
    month = f"{start:%Y-%m}"
    services.add_tariff(
        instrument=facility.sem,
        rate_category="internal",
        purpose="own_use",
        hourly_rate="40.00",
        valid_from=dt.date(2020, 1, 1),
        by=facility.manager,
    )
    f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        started_at=start,
        ended_at=start + dt.timedelta(hours=2),
        beam_on_hours=2,
    )
    services.draft_month(month=start.date().replace(day=1), by=facility.manager)

    page = browser_page
    steps = Steps(page, request.node.name)
    base = live_server.url

    with steps("sign-in"):
        page.goto(f"{base}/sign-in/")
        page.get_by_label("Username").fill("mara.manager")
        page.get_by_label("Password").fill("correct-horse-42")
        page.get_by_role("button", name="Sign in").click()
        expect(page.get_by_role("heading", level=1)).to_contain_text("Facility today")

    with steps("statements-of-the-month"):
        page.get_by_role("link", name="Statements", exact=True).click()
        # The list opens on the month just ended: the one being billed.
        expect(page.get_by_role("heading", level=1)).to_contain_text(f"{start:%B %Y}")
        assert_labelled(page)
        row = page.locator("tr", has_text="KES-01")
        # 2 h at 40.00 an hour (hand-computed).
        expect(row).to_contain_text("80.00 EUR")
        expect(row).to_contain_text("draft")
        row.get_by_role("link", name="Review and finalise the statement of KES-01").click()

    with steps("confirm"):
        expect(page.get_by_role("heading", level=1)).to_contain_text("Finalise the statement of")
        expect(page.locator(".note-warning")).to_contain_text("Finalising cannot be undone.")
        assert_labelled(page)
        page.get_by_role("button", name="Finalise this statement").click()

    with steps("finalised"):
        expect(page.get_by_role("status").first).to_contain_text(
            "Statement S-000001 finalised: 80.00 EUR for KES-01"
        )
        expect(page.locator("#state")).to_contain_text("The lines match the checksum")

    with steps("reflow-at-200-percent"):
        page.set_viewport_size({"width": 640, "height": 900})
        for url in [f"{base}/statements/?month={month}", page.url, f"{base}/usage/?month={month}"]:
            page.goto(url)
            assert page.evaluate(OVERFLOW) <= 0, url
            # Let the charts load now, not while the test database is being torn down.
            page.wait_for_load_state("networkidle")

    statement = Statement.objects.get()
    assert statement.state == StatementState.FINAL and statement.number == 1
