"""How many uploads one worker process analyses per minute (2048 × 1536 16-bit TIFFs).

Runs the real pipeline — content checks, SHA-256, storage, read, metadata, thumbnail, assessment,
flags — in one process on a scratch SQLite database, and prints the figures. Not a test.

    .venv/bin/python benchmarks/pipeline_bench.py [--images 12]
"""

from __future__ import annotations

import argparse
import io
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--images", type=int, default=12)
    args = parser.parse_args()
    scratch = tempfile.mkdtemp(prefix="beamledger-bench-")
    os.environ["DATABASE_URL"] = f"sqlite:///{scratch}/bench.sqlite3"
    os.environ["MEDIA_ROOT"] = f"{scratch}/media"
    os.environ.pop("CELERY_BROKER_URL", None)
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "facility.settings")
    import django

    django.setup()
    import tifffile
    from django.core.files.uploadedfile import SimpleUploadedFile
    from django.core.management import call_command
    from django.db import transaction
    from django.utils import timezone

    from facility.logbook.models import AnalysisState
    from facility.logbook.uploads import upload_micrograph
    from facility.micrograph.synth import make_micrograph
    from facility.micrograph.synth.charging import ChargingSpec
    from tests import factories as f

    call_command("migrate", verbosity=0)
    operator = f.UserFactory(username="bench.operator")
    group = f.GroupFactory(name="Bench group")
    f.MembershipFactory(user=operator, group=group)
    session = f.InstrumentSessionFactory(
        operator=operator,
        account=f.AccountFactory(group=group),
        started_at=timezone.now(),
        ended_at=None,
        beam_on_hours=None,
    )
    print(f"generating {args.images} images of 2048 × 1536, 16-bit ...", file=sys.stderr)
    files = []
    for n in range(args.images):
        spec = ChargingSpec(kinds=("line_jumps", "streaks"), strength=0.7) if n % 3 == 0 else None
        image = make_micrograph(
            seed=100 + n,
            shape=(1536, 2048),
            scene=("particles", "fibres", "porous")[n % 3],
            sigma_px=1.0 + (n % 5),
            dose=300,
            bit_depth=16,
            charging=spec,
        ).image
        buffer = io.BytesIO()
        tifffile.imwrite(buffer, image, description="HV = 5 kV\nWD = 6 mm\nPixel size = 3 nm")
        files.append(buffer.getvalue())
    seconds = []
    for n, data in enumerate(files):
        start = time.perf_counter()
        with transaction.atomic():
            micrograph, _ = upload_micrograph(
                session=session,
                by=operator,
                upload=SimpleUploadedFile(f"bench-{n}.tif", data),
            )
        micrograph.refresh_from_db()
        seconds.append(time.perf_counter() - start)
        assert micrograph.state == AnalysisState.DONE, micrograph.failure_reason
        print(f"  image {n + 1}/{len(files)}: {seconds[-1]:.2f} s", file=sys.stderr)
    median = statistics.median(seconds)
    print(f"images: {len(seconds)} (2048 × 1536, 16-bit TIFF, {len(files[0]) / 1e6:.1f} MB each)")
    print(f"seconds per upload, end to end: median {median:.2f}, worst {max(seconds):.2f}")
    print(f"uploads analysed per minute per worker process: {60 / median:.0f}")


if __name__ == "__main__":
    main()
