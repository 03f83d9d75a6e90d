"""Finder latency at 100 000 sessions (PostgreSQL by default; prints p50 / p95 / worst).

    .venv/bin/python benchmarks/finder_bench.py [--sessions 100000] [--queries 200] [--verbose]
        [--database-url postgres://postgres@127.0.0.1:5432/beamledger_finder_bench]

The database is created and filled on the first run (bulk inserts, a few minutes) and reused
after. Not a test: it prints figures.
"""

from __future__ import annotations

import argparse
import os
import random
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

MATERIALS = {
    "polymer": ["polycaprolactone fibres", "PVDF membrane", "polystyrene beads", "nylon mesh"],
    "ceramic": ["porous alumina", "zirconia fracture surface", "glass fibre", "silica aerogel"],
    "metal": ["steel powder", "aluminium alloy", "gold nanoparticles", "copper foil"],
    "biological": ["pollen grains", "diatom frustules", "leaf cuticle", "bacterial film"],
    "semiconductor": ["silicon wafer", "GaAs nanowires", "ZnO rods"],
    "composite": ["carbon fibre laminate", "filled epoxy"],
    "mineral": ["calcite crystals", "clay particles", "zeolite powder"],
}
CONDUCTIVITY = {
    "polymer": "insulating",
    "ceramic": "insulating",
    "metal": "conducting",
    "biological": "insulating",
    "semiconductor": "semiconducting",
    "composite": "insulating",
    "mineral": "insulating",
}
TEXT_ONLY_SHARE = 0.15  # searches by a word alone, without describing the specimen
FORMS = ["powder", "particles_on_film", "bulk", "thin_film", "fibre", "membrane", "hydrogel"]


def fill(n_sessions: int) -> None:
    from django.db import transaction
    from django.utils import timezone

    from facility.instruments.models import Instrument
    from facility.logbook.models import (
        Coating,
        Conditions,
        Flag,
        InstrumentSession,
        Micrograph,
        Specimen,
    )
    from tests import factories as f

    rng = random.Random(7)
    if InstrumentSession.objects.count() >= n_sessions:
        return
    print(f"filling {n_sessions} sessions (once) ...", file=sys.stderr)
    groups = [f.GroupFactory(name=f"Bench group {g}") for g in range(40)]
    users = []
    for g, group in enumerate(groups):
        user = f.UserFactory(username=f"bench{g}")
        f.MembershipFactory(user=user, group=group)
        users.append((user, f.AccountFactory(code=f"BENCH-{g}", group=group)))
    instruments = [
        f.InstrumentFactory(code=f"bench-{k}", kind=k2)
        for k, k2 in enumerate(["SEM", "SEM", "ESEM", "TEM"])
    ]
    assert Instrument.objects.count() >= 4
    start = timezone.now() - timezone.timedelta(days=3650)
    batch = 5000
    for first in range(0, n_sessions, batch):
        with transaction.atomic():
            specimens, coatings, sessions = [], [], []
            for i in range(first, min(first + batch, n_sessions)):
                klass = rng.choice(list(MATERIALS))
                user, account = rng.choice(users)
                specimens.append(
                    Specimen(
                        name=f"sample {i}",
                        material=rng.choice(MATERIALS[klass]),
                        material_class=klass,
                        conductivity=CONDUCTIVITY[klass],
                        form=rng.choice(FORMS),
                        feature_size_nm=10 ** rng.uniform(0.5, 4),
                        owner=user,
                        group=account.group,
                        preparation="dried, mounted on carbon tape",
                    )
                )
            Specimen.objects.bulk_create(specimens)
            for specimen in specimens:
                if rng.random() < 0.6:
                    coatings.append(
                        Coating(
                            specimen=specimen,
                            material=rng.choice(["Au", "Au-Pd", "Pt", "C"]),
                            thickness_nm=rng.choice([3, 5, 10, 15]),
                        )
                    )
            Coating.objects.bulk_create(coatings)
            coat_of = {c.specimen_id: c for c in coatings}
            for k, specimen in enumerate(specimens):
                user, account = rng.choice(users)
                at = start + timezone.timedelta(hours=(first + k) * 0.8)
                sessions.append(
                    InstrumentSession(
                        instrument=rng.choice(instruments),
                        operator=specimen.owner,
                        account=account,
                        started_at=at,
                        ended_at=at + timezone.timedelta(hours=2),
                        beam_on_hours=2,
                        specimen=specimen,
                        coating=coat_of.get(specimen.id),
                        vacuum_mode=rng.choice(["high", "high", "low"]),
                    )
                )
            InstrumentSession.objects.bulk_create(sessions)
            Conditions.objects.bulk_create(
                [
                    Conditions(
                        session=s,
                        accelerating_voltage_kv=rng.choice([1, 2, 3, 5, 10, 15, 20]),
                        working_distance_mm=rng.choice([3, 5, 8, 10]),
                        detector="SE",
                    )
                    for s in sessions
                ]
            )
            Micrograph.objects.bulk_create(
                [Micrograph(session=s, sha256=f"{s.id:064d}", state="done") for s in sessions]
            )
            Flag.objects.bulk_create(
                [
                    Flag(
                        session=s,
                        code=rng.choice(["charging", "low_resolution"]),
                        severity="problem",
                        message="bench",
                    )
                    for s in sessions
                    if rng.random() < 0.25
                ]
            )
        print(f"  {min(first + batch, n_sessions)} sessions", file=sys.stderr)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sessions", type=int, default=100_000)
    parser.add_argument("--queries", type=int, default=200)
    parser.add_argument("--verbose", action="store_true", help="print the slowest queries")
    parser.add_argument(
        "--database-url",
        default="postgres://postgres@127.0.0.1:5432/beamledger_finder_bench",
    )
    args = parser.parse_args()
    os.environ["DATABASE_URL"] = args.database_url
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "facility.settings")
    if args.database_url.startswith("postgres"):
        import psycopg

        base = args.database_url.rsplit("/", 1)
        with psycopg.connect(base[0] + "/postgres", autocommit=True) as conn:
            exists = conn.execute(
                "SELECT 1 FROM pg_database WHERE datname=%s", (base[1],)
            ).fetchone()
            if not exists:
                conn.execute(f'CREATE DATABASE "{base[1]}"')
    import django

    django.setup()
    from django.core.management import call_command

    call_command("migrate", verbosity=0)
    fill(args.sessions)
    from django.db import connection

    with connection.cursor() as cursor:
        cursor.execute("ANALYZE") if connection.vendor == "postgresql" else None
    from facility.finder import digest
    from facility.finder.criteria import make_criteria
    from facility.finder.queries import search
    from tests import factories as f

    t0 = time.perf_counter()
    rows = len(digest.current().table())
    print(f"digest loaded once per process: {rows} sessions in {time.perf_counter() - t0:.2f} s")
    viewer = f.UserFactory(username="bench0")
    rng = random.Random(11)
    timed: list[tuple[float, str, object]] = []
    for _ in range(args.queries):
        klass = rng.choice(list(MATERIALS))
        word = rng.choice(["", rng.choice(MATERIALS[klass]).split()[0], "alumna"])
        if rng.random() < TEXT_ONLY_SHARE and word:
            kind, criteria = "text only", make_criteria(text=word)
        else:
            kind = "described"
            criteria = make_criteria(
                material_class=klass,
                conductivity=CONDUCTIVITY[klass],
                form=rng.choice(FORMS),
                feature_size_nm=10 ** rng.uniform(1, 3),
                coating=rng.choice(["none", "Au", None]),
                text=word,
            )
        t0 = time.perf_counter()
        search(viewer, criteria)
        timed.append((time.perf_counter() - t0, kind, criteria))
    if args.verbose:
        for took, _kind, criteria in sorted(timed, key=lambda t: t[0], reverse=True)[:5]:
            print(f"  {took * 1000:.0f} ms  {criteria}")
    print(f"database: {connection.vendor}, sessions: {args.sessions}, queries: {len(timed)}")
    for label, wanted in (
        ("all searches", {"described", "text only"}),
        ("described (attributes, some with text)", {"described"}),
        ("text only", {"text only"}),
    ):
        seconds = sorted(t for t, kind, _ in timed if kind in wanted)
        if not seconds:
            continue
        p95 = seconds[int(0.95 * (len(seconds) - 1))]
        print(
            f"{label}: n {len(seconds)}, p50 {statistics.median(seconds) * 1000:.0f} ms, "
            f"p95 {p95 * 1000:.0f} ms, worst {seconds[-1] * 1000:.0f} ms"
        )


if __name__ == "__main__":
    main()
