"""Render times of the pages on the demo facility; prints the slowest first. Not a timed test.

    .venv/bin/python benchmarks/pages_bench.py [--repeat 15] [--keep]

Builds the invented demo facility (facility.demo) in a fresh SQLite file under a temporary folder
(or uses DATABASE_URL if set), then requests every page as the people who use it, through Django's
test client: the full request path (middleware, sessions, auth, queries, templates), no network.
Each page is requested once to warm up, then `--repeat` times; the median and the worst are shown
with the number of database queries. The goal in issue 9 is under 200 ms per page.
"""

from __future__ import annotations

import argparse
import io
import os
import secrets
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def _prepare_environment(folder: Path) -> None:
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "facility.settings")
    os.environ.setdefault("DATABASE_URL", f"sqlite:///{folder / 'bench.sqlite3'}")
    os.environ.setdefault("MEDIA_ROOT", str(folder / "media"))
    # As in production: DEBUG off (no query log, no template debug data), so a random key.
    os.environ.setdefault("DEBUG", "false")
    os.environ.setdefault("SECRET_KEY", secrets.token_urlsafe(48))
    os.environ.setdefault("LOG_LEVEL", "WARNING")


def _pages(users: dict, context: dict) -> list[tuple[str, object, str]]:
    """(label, who, url) for every page worth timing."""
    from django.urls import reverse

    from facility.bookings.feeds import feed_token

    researcher, staff = users["researcher"], users["staff"]
    code = context["instrument"].code
    pages = [
        ("home (researcher)", researcher, reverse("home")),
        ("home (staff)", staff, reverse("home")),
        ("instruments (researcher)", researcher, reverse("instrument-list")),
        ("instrument week (researcher)", researcher, reverse("instrument-detail", args=[code])),
        ("instrument week (staff)", staff, reverse("instrument-detail", args=[code])),
        (
            "instrument week, whole day (staff)",
            staff,
            reverse("instrument-detail", args=[code]) + "?hours=all",
        ),
        ("booking form", researcher, reverse("booking-new", args=[code])),
        ("my bookings", researcher, reverse("booking-list")),
        ("station", researcher, reverse("station", args=[code])),
        ("messages", researcher, reverse("notification-list")),
        ("calendar feeds page", researcher, reverse("calendar-feeds")),
        ("feed: my bookings (.ics)", None, reverse("feed-personal", args=[feed_token(researcher)])),
        (
            "feed: instrument (.ics)",
            None,
            reverse("feed-instrument", args=[feed_token(staff), code]),
        ),
    ]
    if context.get("session") is not None:
        pk = context["session"].pk
        pages += [
            (
                "session page (operator)",
                context["session"].operator,
                reverse("session-detail", args=[pk]),
            ),
            ("session page (staff)", staff, reverse("session-detail", args=[pk])),
            ("session live fragment", staff, reverse("session-live", args=[pk])),
        ]
    if context.get("booking") is not None:
        booking = context["booking"]
        pages.append(("cancel page", booking.user, reverse("booking-cancel", args=[booking.pk])))
    return pages


def _pick(User):
    """The busiest researcher, a staff member, the busiest instrument, the fullest session."""
    from django.db.models import Count
    from django.utils import timezone

    from facility.bookings.models import Booking, BookingState
    from facility.instruments.models import Instrument
    from facility.logbook.models import InstrumentSession

    staff = User.objects.filter(is_staff=True, is_active=True).first()
    researcher = (
        User.objects.filter(is_staff=False, is_active=True)
        .annotate(n=Count("instrument_sessions"))
        .order_by("-n")
        .first()
    )
    instrument = Instrument.objects.annotate(n=Count("bookings")).order_by("-n").first()
    session = (
        InstrumentSession.objects.annotate(images=Count("micrographs"), c=Count("conditions"))
        .order_by("-images", "-c")
        .first()
    )
    booking = (
        Booking.objects.filter(
            state__in=(BookingState.CONFIRMED, BookingState.REQUESTED),
            starts_at__gt=timezone.now(),
        )
        .order_by("starts_at")
        .first()
    )
    return {"researcher": researcher, "staff": staff}, {
        "instrument": instrument,
        "session": session,
        "booking": booking,
    }


def _add_images(session, staff, count: int) -> None:
    """Upload `count` synthetic micrographs (some blurred, some charging) to one session, as the
    demo has none; analysis runs in-process without a broker, so thumbnails and flags exist."""
    import tifffile

    from facility.logbook.uploads import upload_micrograph
    from facility.micrograph.synth import make_micrograph
    from facility.micrograph.synth.charging import ChargingSpec

    for n in range(count):
        charging = ChargingSpec(kinds=("streaks", "tails"), strength=0.8) if n % 4 == 3 else None
        image = make_micrograph(
            seed=1000 + n,
            shape=(384, 384),
            sigma_px=1.5 if n % 3 else 5.0,
            dose=300,
            bit_depth=16,
            charging=charging,
        ).image
        buffer = io.BytesIO()
        tifffile.imwrite(buffer, image)
        buffer.seek(0)
        buffer.size = len(buffer.getvalue())
        upload_micrograph(
            session=session, by=staff, upload=buffer, original_name=f"field-{n:02d}.tif"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=15, help="timed requests per page")
    parser.add_argument("--keep", action="store_true", help="keep the temporary database")
    parser.add_argument(
        "--images", type=int, default=12, help="synthetic images added to the fullest session"
    )
    args = parser.parse_args()

    folder = Path(tempfile.mkdtemp(prefix="beamledger-pages-bench-"))
    _prepare_environment(folder)
    import django

    django.setup()
    from django.contrib.auth import get_user_model
    from django.core.management import call_command
    from django.db import connection, reset_queries
    from django.test import Client
    from django.test.utils import CaptureQueriesContext, setup_test_environment

    from facility.demo import build as demo

    setup_test_environment()  # lets the test client run against the 'testserver' host
    started = time.perf_counter()
    call_command("migrate", verbosity=0)
    if not demo.is_loaded():
        demo.load()
    print(f"demo data ready in {time.perf_counter() - started:.1f} s ({connection.vendor})")

    from facility.bookings.models import Booking
    from facility.logbook.models import InstrumentSession, Micrograph

    print(
        f"  {Booking.objects.count()} bookings, {InstrumentSession.objects.count()} sessions, "
        f"{Micrograph.objects.count()} micrographs"
    )
    users, context = _pick(get_user_model())
    if users["researcher"] is None or users["staff"] is None or context["instrument"] is None:
        raise SystemExit("the demo data has no researcher, staff member or instrument")
    session = context["session"]
    if session is not None and args.images and not session.micrographs.exists():
        t0 = time.perf_counter()
        _add_images(session, users["staff"], args.images)
        print(f"  added {args.images} analysed images in {time.perf_counter() - t0:.1f} s")

    results = []
    for label, who, url in _pages(users, context):
        client = Client()
        if who is not None:
            client.force_login(who)
        response = client.get(url)
        if response.status_code != 200:
            print(f"  {label}: {url} answered {response.status_code}; skipped")
            continue
        reset_queries()  # the query log is emptied at every request start anyway
        with CaptureQueriesContext(connection) as queries:
            client.get(url)
        count = len(queries)  # read now: the next request empties the log it slices
        times = []
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            client.get(url)
            times.append((time.perf_counter() - t0) * 1000)
        results.append((statistics.median(times), max(times), count, label, url))

    results.sort(reverse=True)
    print(f"\n{'page':<38} {'median ms':>10} {'worst ms':>9} {'queries':>8}")
    for median, worst, count, label, _url in results:
        mark = "  over 200 ms" if median > 200 else ""
        print(f"{label:<38} {median:>10.1f} {worst:>9.1f} {count:>8}{mark}")
    if not args.keep:
        import shutil

        connection.close()
        shutil.rmtree(folder, ignore_errors=True)
    else:
        print(f"\ndatabase kept in {folder}")


if __name__ == "__main__":
    main()
