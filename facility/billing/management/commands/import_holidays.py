"""``manage.py import_holidays FILE.ics --by USERNAME [--dry-run]``

Records the all-day events of an iCalendar file as public holidays (out of hours all day).
Existing days keep their row (the name is updated). Final statements keep their prices; drafts
follow when drafted again. Bad input exits non-zero with one line on stderr.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser

from facility.billing import services
from facility.billing.holiday_import import holidays_from_ics
from facility.billing.management.commands._common import staff_user
from facility.errors import DomainError


class Command(BaseCommand):
    help = "Import public holidays from an iCalendar (.ics) file."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("file", help="an .ics file")
        parser.add_argument("--by", required=True, help="staff username")
        parser.add_argument("--dry-run", action="store_true", help="list, write nothing")

    def handle(self, *args: Any, **options: Any) -> None:
        by = staff_user(options["by"])
        try:
            found = holidays_from_ics(Path(options["file"]).read_bytes())
        except OSError as exc:
            raise CommandError(f"cannot read {options['file']}: {exc.strerror or exc}") from None
        except ValueError as exc:
            raise CommandError(f"{options['file']}: {exc}") from None
        for day, name in found:
            self.stdout.write(f"{day:%Y-%m-%d} {name}")
            if not options["dry_run"]:
                try:
                    services.add_holiday(day=day, name=name, by=by)
                except DomainError as exc:
                    raise CommandError(exc.message) from None
        verb = "found" if options["dry_run"] else "recorded"
        self.stdout.write(f"{len(found)} holiday(s) {verb}")
