"""Re-run image assessment after an analysis upgrade or a threshold change."""

from __future__ import annotations

import datetime as dt

from django.core.management.base import BaseCommand, CommandError
from tqdm import tqdm

from facility.logbook import analysis
from facility.logbook.models import AnalysisState, Micrograph


class Command(BaseCommand):
    help = (
        "Re-run the analysis of micrographs (after an analysis upgrade or a change of the flag "
        "thresholds) and recompute their sessions' flags. Choose exactly one of --session, "
        "--instrument, --since or --all."
    )

    def add_arguments(self, parser):
        which = parser.add_mutually_exclusive_group(required=True)
        which.add_argument("--session", type=int, help="id of one instrument session")
        which.add_argument("--instrument", help="instrument code, e.g. fe-sem")
        which.add_argument("--since", help="uploaded on or after this date (YYYY-MM-DD)")
        which.add_argument("--all", action="store_true", help="every micrograph")
        parser.add_argument(
            "--failed-only", action="store_true", help="only micrographs whose analysis failed"
        )

    def handle(self, *args, **options):
        qs = Micrograph.objects.order_by("id")
        if options["session"] is not None:
            qs = qs.filter(session_id=options["session"])
            if not qs.exists() and not _session_exists(options["session"]):
                raise CommandError(f"No instrument session with id {options['session']}.")
        elif options["instrument"]:
            from facility.instruments.models import Instrument

            if not Instrument.objects.filter(code=options["instrument"]).exists():
                raise CommandError(f"No instrument with code {options['instrument']!r}.")
            qs = qs.filter(session__instrument__code=options["instrument"])
        elif options["since"]:
            try:
                since = dt.date.fromisoformat(options["since"])
            except ValueError:
                raise CommandError(
                    f"--since {options['since']!r} is not a date; use YYYY-MM-DD."
                ) from None
            qs = qs.filter(uploaded_at__date__gte=since)
        if options["failed_only"]:
            qs = qs.filter(state=AnalysisState.FAILED)
        ids = list(qs.values_list("id", flat=True))
        done = failed = 0
        sessions = set()
        for micrograph_id in tqdm(ids, desc="reanalysing", unit="image", disable=len(ids) < 3):
            result = analysis.analyse(micrograph_id=micrograph_id, force=True)
            sessions.add(result.session_id)
            if result.state == AnalysisState.DONE:
                done += 1
            else:
                failed += 1
        self.stdout.write(
            f"Reanalysed {len(ids)} micrographs in {len(sessions)} sessions: "
            f"{done} analysed, {failed} failed."
        )


def _session_exists(pk: int) -> bool:
    from facility.logbook.models import InstrumentSession

    return InstrumentSession.objects.filter(pk=pk).exists()
