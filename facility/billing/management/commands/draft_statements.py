"""``manage.py draft_statements --month 2027-03 [--account CODE] [--by USERNAME] [--notify]``

Drafts (or redrafts) the statements of a month from the logbook and bookings; final statements
are left alone. Progress goes to stderr, a summary to stdout. Bad input, or an account that
could not be drafted, exits non-zero with one line on stderr.
"""

from __future__ import annotations

from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser
from tqdm import tqdm

from facility.billing import services
from facility.billing.management.commands._common import RawStream, month_arg, staff_user
from facility.errors import DomainError
from facility.people.models import Account


class Command(BaseCommand):
    help = "Draft the statements of a month (YYYY-MM) for every account, or for one."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("--month", required=True, help="month to bill, YYYY-MM")
        parser.add_argument("--account", help="only this account code")
        parser.add_argument("--by", help="staff username recorded as the one who drafted")
        parser.add_argument("--notify", action="store_true", help="tell staff (once per month)")

    def handle(self, *args: Any, **options: Any) -> None:
        month = month_arg(options["month"])
        by = staff_user(options["by"]) if options["by"] else None
        if options["account"]:
            account = Account.objects.filter(code=options["account"]).first()
            if account is None:
                raise CommandError(f"no account with code {options['account']!r}")
            try:
                statement = services.draft_statement(account=account, month=month, by=by)
            except DomainError as exc:
                raise CommandError(exc.message) from None
            if statement is None:
                self.stdout.write(f"{account.code} {month:%Y-%m}: nothing to bill")
                return
            self.stdout.write(
                f"{account.code} {month:%Y-%m}: draft #{statement.pk}, "
                f"{statement.lines.count()} lines, {statement.total} {statement.currency}"
            )
            for problem in statement.problems:
                self.stdout.write(f"  problem: {problem}")
            return

        bar = tqdm(
            total=0, desc=f"draft {month:%Y-%m}", unit="account", file=RawStream(self.stderr)
        )

        def progress(done: int, total: int) -> None:
            bar.total = total
            bar.update(done - bar.n)

        try:
            run = services.draft_month(
                month=month, by=by, tell_staff=options["notify"], progress=progress
            )
        except DomainError as exc:
            raise CommandError(exc.message) from None
        finally:
            bar.close()
        summary = run.as_dict()
        totals = ", ".join(f"{v} {k}" for k, v in summary["totals"].items()) or "nothing"
        self.stdout.write(
            f"{summary['month']}: {summary['statements']} drafts, {summary['lines']} lines, "
            f"totals {totals}; {summary['removed']} empty drafts removed; "
            f"{len(run.skipped_final)} already final"
        )
        for code, problems in sorted(run.problems.items()):
            for problem in problems:
                self.stdout.write(f"  {code}: {problem}")
        if run.failed:
            raise CommandError(
                f"{len(run.failed)} account(s) not drafted, run again: {', '.join(sorted(run.failed))}"
            )
