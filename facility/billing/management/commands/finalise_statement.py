"""``manage.py finalise_statement ID --by USERNAME [--checksum HEX]``

Finalises one draft statement (by its id): rebuilds it from the data, numbers it and seals it
with its checksum. With --checksum, refuses when the draft changed since that checksum was read.
Refusals exit non-zero with one line on stderr.
"""

from __future__ import annotations

from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser

from facility.billing import services
from facility.billing.management.commands._common import staff_user
from facility.billing.models import Statement
from facility.errors import DomainError


class Command(BaseCommand):
    help = "Finalise a draft statement: number it, checksum it, make it immutable."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("statement", type=int, help="statement id (a draft has no number yet)")
        parser.add_argument("--by", required=True, help="staff username who finalises")
        parser.add_argument("--checksum", help="the draft checksum that was reviewed")

    def handle(self, *args: Any, **options: Any) -> None:
        by = staff_user(options["by"])
        statement = Statement.objects.filter(pk=options["statement"]).first()
        if statement is None:
            raise CommandError(f"no statement with id {options['statement']}")
        try:
            final = services.finalise_statement(
                statement=statement, by=by, expected_checksum=options["checksum"]
            )
        except DomainError as exc:
            raise CommandError(exc.message) from None
        self.stdout.write(
            f"{final.reference}: {final.account.code} {final.month:%Y-%m}, "
            f"{final.total} {final.currency}, checksum {final.checksum}"
        )
