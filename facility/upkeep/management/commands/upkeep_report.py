"""``manage.py upkeep_report``: an instrument's counters, or its audit export, from the shell.

``python manage.py upkeep_report --instrument CODE [--from DAY] [--to DAY]
[--format table|csv|pdf] [--output FILE] [--charts DIR]``

``table`` (the default) prints each counter against its limit; ``csv`` and ``pdf`` write the audit
export for the period (default: the last 90 days up to today; csv to stdout unless ``--output``).
``--charts DIR`` also writes one SVG chart per counter. Progress goes to stderr; bad input gives
one line on stderr and exit status 1.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser
from django.utils import timezone

from facility.errors import DomainError
from facility.instruments.models import Instrument
from facility.upkeep import audit
from facility.upkeep.charts import counter_chart
from facility.upkeep.status import CounterStatus, instrument_status

DEFAULT_DAYS = 90


def _day(text: str) -> dt.date:
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise CommandError(f"{text!r} is not a date; write it as YYYY-MM-DD.") from None


def format_table(statuses: list[CounterStatus]) -> str:
    header = ("counter", "value", "rated", "share", "4 wk/wk", "12 wk/wk", "forecast", "drift")
    lines = [header]
    for s in statuses:
        rated = (
            "—"
            if s.limit.rated is None
            else f"{s.limit.rated:g}" + (" (default)" if s.limit.is_default else "")
        )
        lines.append(
            (
                s.spec.label,
                f"{s.value:.1f} {s.spec.unit}",
                rated,
                "—" if s.share is None else f"{s.share:.0%}",
                "—" if s.rates.get(4) is None else f"{s.rates[4]:.1f}",
                "—" if s.rates.get(12) is None else f"{s.rates[12]:.1f}",
                s.forecast.describe(timezone.get_current_timezone()) if s.forecast else "no rating",
                f"{s.drift:+.1f}",
            )
        )
    widths = [max(len(row[i]) for row in lines) for i in range(len(header))]
    return "\n".join(
        "  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip() for row in lines
    )


class Command(BaseCommand):
    help = "Show an instrument's upkeep counters, or write its audit export (CSV or PDF)."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--instrument", required=True, help="Instrument code.")
        parser.add_argument("--from", dest="first", help="First day, YYYY-MM-DD.")
        parser.add_argument("--to", dest="last", help="Last day, YYYY-MM-DD (default today).")
        parser.add_argument("--format", choices=("table", "csv", "pdf"), default="table")
        parser.add_argument("--output", help="File to write (required for pdf).")
        parser.add_argument("--charts", help="Directory for one SVG chart per counter.")

    def handle(self, *args: Any, **options: Any) -> None:
        last = _day(options["last"]) if options["last"] else timezone.localdate()
        first = _day(options["first"]) if options["first"] else last - dt.timedelta(DEFAULT_DAYS)
        if last < first:
            raise CommandError("--to comes before --from.")
        fmt, output = options["format"], options["output"]
        if fmt == "pdf" and not output:
            raise CommandError("--format pdf needs --output FILE.")
        charts = Path(options["charts"]) if options["charts"] else None
        if charts is not None and not charts.is_dir():
            raise CommandError(f"--charts {charts} is not a directory.")
        # Input is checked before the database is touched.
        code = options["instrument"]
        instrument = Instrument.objects.filter(code=code).first()
        if instrument is None:
            raise CommandError(f"No instrument with code {code!r}.")
        try:
            self._run(instrument, first, last, fmt, output, charts)
        except DomainError as exc:
            raise CommandError(exc.message) from None
        except OSError as exc:
            raise CommandError(f"cannot write: {exc}") from None

    def _progress(self, text: str) -> None:
        self.stderr.write(f"upkeep_report: {text}")

    def _run(
        self,
        instrument: Instrument,
        first: dt.date,
        last: dt.date,
        fmt: str,
        output: str | None,
        charts: Path | None,
    ) -> None:
        if fmt == "table":
            self._progress(f"counting {instrument.code}")
            statuses = instrument_status(instrument)
            self.stdout.write(format_table(statuses))
        else:
            self._progress(f"collecting {instrument.code} from {first} to {last}")
            report = audit.build_report(instrument, first, last)
            statuses = report.counters
            if fmt == "csv":
                text = audit.to_csv(report)
                if output:
                    Path(output).write_text(text, encoding="utf-8")
                else:
                    self.stdout.write(text, ending="")
            else:
                from facility.upkeep.audit_pdf import to_pdf

                self._progress("rendering PDF")
                Path(output or "").write_bytes(to_pdf(report))
            if output:
                self._progress(f"wrote {output}")
        if charts is not None:
            for i, status in enumerate(statuses, 1):
                path = charts / f"{status.spec.key.replace(':', '_')}.svg"
                self._progress(f"chart {i}/{len(statuses)}: {path}")
                path.write_bytes(counter_chart(status))
