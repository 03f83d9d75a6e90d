"""``manage.py export_statements --month 2027-03 [--drafts] [--output FILE]``
``manage.py export_statements --statement ID --pdf FILE``

The month's CSV for the finance office (final statements; --drafts adds drafts), to a file or
stdout; or one statement as a printable PDF. Bad input exits non-zero with one stderr line.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser

from facility.billing import exports
from facility.billing.management.commands._common import month_arg
from facility.billing.models import Statement
from facility.billing.pdf import statement_pdf


class Command(BaseCommand):
    help = "Export a month's statements as CSV, or one statement as PDF."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--month", help="YYYY-MM: the month's CSV")
        parser.add_argument("--drafts", action="store_true", help="include draft statements")
        parser.add_argument("--output", help="CSV file (default: stdout)")
        parser.add_argument("--statement", type=int, help="statement id for --pdf")
        parser.add_argument("--pdf", help="PDF file to write for --statement")

    def handle(self, *args: Any, **options: Any) -> None:
        if options["statement"] is not None:
            if not options["pdf"]:
                raise CommandError("--statement needs --pdf FILE")
            statement = Statement.objects.filter(pk=options["statement"]).first()
            if statement is None:
                raise CommandError(f"no statement with id {options['statement']}")
            self._write(Path(options["pdf"]), statement_pdf(statement))
            self.stdout.write(f"wrote {options['pdf']}")
            return
        if not options["month"]:
            raise CommandError("give --month YYYY-MM (or --statement ID --pdf FILE)")
        month = month_arg(options["month"])
        if options["output"]:
            text = exports.month_csv(month, include_drafts=options["drafts"])
            self._write(Path(options["output"]), text.encode("utf-8"))
            self.stdout.write(f"wrote {options['output']}")
        else:
            exports.month_csv(month, self.stdout, include_drafts=options["drafts"])

    def _write(self, path: Path, data: bytes) -> None:
        try:
            path.write_bytes(data)
        except OSError as exc:
            raise CommandError(f"cannot write {path}: {exc.strerror or exc}") from None
