"""How long drafting a month takes: 200 accounts, 20 000 sessions (prints figures; not a test).

    .venv/bin/python benchmarks/billing_bench.py [--accounts 200] [--sessions 20000]
    .venv/bin/python benchmarks/billing_bench.py \
        --database-url postgres://postgres@127.0.0.1:5432/beamledger_billing_bench

Without --database-url the run uses a fresh SQLite file in a temporary folder. With a PostgreSQL
URL the database it names must end in "_bench": it is dropped and created anew, then migrated.
The fixtures are invented and bulk-inserted: 50 instruments with 24 tariffs each (3 rate
categories × 4 purposes, with a price change on the 16th), 200 accounts in 50 groups, 400 users
(80 % internal, 15 % external academic, 5 % commercial), sessions spread over
March 2027 without overlaps per instrument (a third of them booked, assisted ones with staff
time), plus no-show and late-cancelled bookings. Then it times, in the facility zone
Europe/Vienna: drafting the month, drafting it again (idempotent rerun), the finance office's
month CSV of the drafts, and finalising every statement.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import random
import sys
import tempfile
import time
from decimal import Decimal
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

MONTH = dt.date(2027, 3, 1)
INSTRUMENTS = 50


def _prepare(database_url: str | None, folder: Path) -> None:
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "facility.settings")
    os.environ["TIME_ZONE"] = "Europe/Vienna"
    os.environ.setdefault("LOG_LEVEL", "WARNING")
    os.environ.setdefault("MEDIA_ROOT", str(folder / "media"))
    if database_url is None:
        os.environ["DATABASE_URL"] = f"sqlite:///{folder / 'billing_bench.sqlite3'}"
        return
    if not database_url.rsplit("/", 1)[-1].endswith("_bench"):
        sys.exit("refusing: the PostgreSQL database name must end in _bench (it is re-created)")
    import psycopg

    base, name = database_url.rsplit("/", 1)
    with psycopg.connect(f"{base}/postgres", autocommit=True) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}"')
        admin.execute(f'CREATE DATABASE "{name}"')
    os.environ["DATABASE_URL"] = database_url


def _fill(n_accounts: int, n_sessions: int, seed: int = 7) -> dict[str, int]:
    from django.contrib.auth import get_user_model
    from django.db import transaction
    from django.utils import timezone

    from facility.billing.models import Holiday, Tariff
    from facility.billing.months import month_bounds
    from facility.bookings.models import Booking, BookingState, Purpose
    from facility.instruments.models import Instrument
    from facility.logbook.models import InstrumentSession
    from facility.people.models import Account, Group, Profile, RateCategory

    rng = random.Random(seed)
    tz = timezone.get_default_timezone()
    user_model = get_user_model()
    with transaction.atomic():
        manager = user_model.objects.create(username="bench.manager", is_staff=True)
        Profile.objects.create(user=manager, role="manager")
        instruments = Instrument.objects.bulk_create(
            Instrument(code=f"bench-{k:02d}", name=f"Bench SEM {k:02d}", kind="SEM")
            for k in range(INSTRUMENTS)
        )
        categories = list(RateCategory.values)
        tariffs = []
        for instrument in instruments:
            for category in categories:
                for purpose in Purpose.values:
                    rate = Decimal(60 + 20 * categories.index(category) + instrument.id % 7)
                    common = {
                        "instrument": instrument,
                        "rate_category": category,
                        "purpose": purpose,
                        "staff_hourly_rate": Decimal("55.00"),
                        "increment_minutes": 15,
                        "minimum_charge": Decimal("20.00"),
                        "out_of_hours_factor": Decimal("1.5"),
                        "charge_basis": "greater",
                        "late_cancellation_share": Decimal("0.5"),
                        "no_show_share": Decimal("1"),
                    }
                    tariffs.append(
                        Tariff(
                            **common,
                            hourly_rate=rate,
                            valid_from=dt.date(2027, 1, 1),
                            valid_to=dt.date(2027, 3, 15),
                        )
                    )
                    tariffs.append(
                        Tariff(**common, hourly_rate=rate + 5, valid_from=dt.date(2027, 3, 16))
                    )
        Tariff.objects.bulk_create(tariffs, batch_size=1000)
        Holiday.objects.create(day=dt.date(2027, 3, 29), name="Easter Monday")
        groups = Group.objects.bulk_create(Group(name=f"Bench group {k}") for k in range(50))
        accounts = Account.objects.bulk_create(
            Account(
                code=f"BENCH-{k:04d}",
                name=f"Bench account {k}",
                kind="grant",
                group=groups[k % len(groups)],
                valid_from=dt.date(2020, 1, 1),
            )
            for k in range(n_accounts)
        )
        users = user_model.objects.bulk_create(
            user_model(username=f"bench.user{k}") for k in range(2 * n_accounts)
        )
        # Mostly internal users, some external academics, a few commercial clients.
        weights = [0.8, 0.15, 0.05]
        Profile.objects.bulk_create(
            Profile(user=u, rate_category=rng.choices(categories, weights)[0]) for u in users
        )
        start, end = month_bounds(MONTH, tz)
        span = int((end - start).total_seconds() // 60)
        per_instrument = -(-n_sessions // INSTRUMENTS)
        spacing = span // per_instrument
        sessions, bookings, made = [], [], 0
        purposes = [Purpose.OWN_USE] * 6 + [Purpose.ASSISTED, Purpose.TRAINING, Purpose.SERVICE]
        for instrument in instruments:
            for slot in range(per_instrument):
                if made == n_sessions:
                    break
                made += 1
                k = rng.randrange(n_accounts)
                began = start + dt.timedelta(minutes=slot * spacing + rng.randrange(3))
                length = dt.timedelta(minutes=rng.randrange(10, max(11, spacing - 12)))
                purpose = rng.choice(purposes)
                booking = None
                if rng.random() < 1 / 3:
                    booking = Booking(
                        instrument=instrument,
                        user=users[2 * k],
                        account=accounts[k],
                        starts_at=began - dt.timedelta(minutes=2),
                        ends_at=began + length + dt.timedelta(minutes=rng.randrange(0, 8)),
                        purpose=purpose,
                        state=BookingState.DONE,
                    )
                    bookings.append(booking)
                sessions.append(
                    InstrumentSession(
                        instrument=instrument,
                        operator=users[2 * k + rng.randrange(2)],
                        account=accounts[k],
                        booking=booking,
                        purpose=purpose,
                        started_at=began,
                        ended_at=began + length,
                        beam_on_hours=Decimal("0.50"),
                        staff_minutes=rng.randrange(0, 90) if purpose == Purpose.ASSISTED else 0,
                    )
                )
        Booking.objects.bulk_create(bookings, batch_size=2000)
        InstrumentSession.objects.bulk_create(sessions, batch_size=2000)
        missed = []
        for n in range(n_sessions // 20):
            k = rng.randrange(n_accounts)
            began = start + dt.timedelta(minutes=rng.randrange(span - 300))
            missed.append(
                Booking(
                    instrument=rng.choice(instruments),
                    user=users[2 * k],
                    account=accounts[k],
                    starts_at=began,
                    ends_at=began + dt.timedelta(minutes=rng.randrange(30, 240)),
                    state=BookingState.NO_SHOW if n % 2 else BookingState.LATE_CANCELLED,
                    cancelled_at=None if n % 2 else began - dt.timedelta(hours=1),
                )
            )
        Booking.objects.bulk_create(missed, batch_size=2000)
    return {
        "accounts": n_accounts,
        "sessions": len(sessions),
        "booked sessions": len(bookings),
        "no-show / late bookings": len(missed),
        "tariffs": len(tariffs),
        "manager_id": manager.pk,
    }


def _timed(label: str, work):
    began = time.perf_counter()
    result = work()
    seconds = time.perf_counter() - began
    print(f"{label:<44} {seconds:8.2f} s")
    return result, seconds


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--accounts", type=int, default=200)
    parser.add_argument("--sessions", type=int, default=20_000)
    parser.add_argument("--database-url", default=None)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="billing-bench-") as folder:
        _prepare(args.database_url, Path(folder))
        import django

        django.setup()
        from django.contrib.auth import get_user_model
        from django.core.management import call_command
        from django.db import connection

        from facility.billing import exports, services
        from facility.billing.models import Charge, Statement

        call_command("migrate", verbosity=0)
        print(f"database: {connection.vendor} {connection.settings_dict['NAME']}")
        sizes, _ = _timed("fill (bulk inserts)", lambda: _fill(args.accounts, args.sessions))
        manager = get_user_model().objects.get(pk=sizes.pop("manager_id"))
        print(", ".join(f"{v} {k}" for k, v in sizes.items()))

        run, first = _timed(
            "draft the month (first run)", lambda: services.draft_month(month=MONTH)
        )
        print(
            f"  {len(run.statements)} statements, {run.lines} lines, totals "
            + ", ".join(f"{v} {k}" for k, v in run.as_dict()["totals"].items())
            + f"; {len(run.problems)} with problems; {sizes['sessions'] / first:,.0f} sessions/s"
        )
        rerun, _ = _timed(
            "draft the month again (idempotent rerun)", lambda: services.draft_month(month=MONTH)
        )
        assert rerun.as_dict() == run.as_dict(), "a rerun must give the same drafts"
        csv_text, _ = _timed(
            "month CSV of the drafts", lambda: exports.month_csv(MONTH, include_drafts=True)
        )
        print(f"  {csv_text.count(chr(10)) - 1} rows, {len(csv_text) / 1e6:.1f} MB")
        after = dt.datetime(2027, 4, 2, 9, tzinfo=dt.UTC)

        def finalise_all() -> int:
            done = 0
            for statement in Statement.objects.filter(month=MONTH).order_by("id"):
                if not statement.problems:
                    services.finalise_statement(statement=statement, by=manager, now=after)
                    done += 1
            return done

        finalised, seconds = _timed("finalise every statement", finalise_all)
        print(f"  {finalised} finalised ({seconds / max(1, finalised) * 1000:.0f} ms each)")
        assert Charge.objects.exclude(session=None).values("session").distinct().count() == (
            Charge.objects.exclude(session=None).count()
        )


if __name__ == "__main__":
    main()
