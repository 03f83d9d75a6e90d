"""`manage.py load_demo`: load the invented demo facility (safe to run twice)."""

from __future__ import annotations

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError
from django.db import transaction

from facility.demo import build as demo
from facility.demo import catalogue, cleanup


class Command(BaseCommand):
    help = (
        "Load an invented electron-microscopy core facility with three months of bookings and "
        "sessions. Does nothing if the demo is already loaded; --reset deletes and reloads it."
    )

    def add_arguments(self, parser) -> None:
        parser.add_argument(
            "--reset", action="store_true", help="Delete the demo data, then load it afresh."
        )
        parser.add_argument(
            "--list-logins",
            action="store_true",
            help="Print the demo logins (username, role, group), one a line, and stop.",
        )
        parser.add_argument(
            "--print-password",
            action="store_true",
            help="Print the password all demo logins share, and stop.",
        )
        parser.add_argument(
            "--days",
            type=int,
            default=catalogue.HISTORY_DAYS,
            help=f"How many days of past bookings and sessions to build "
            f"(default {catalogue.HISTORY_DAYS}, about three months).",
        )
        parser.add_argument(
            "--image-sessions",
            type=int,
            default=12,
            help="How many recent sessions get generated micrographs (default 12; 0 for none).",
        )
        parser.add_argument(
            "--force",
            action="store_true",
            help="Load even with DEBUG off (never on a real facility's database).",
        )

    def handle(self, *args, **options) -> None:
        # The demo's invented people have no real mailboxes: their messages stay in the app
        # instead of scrolling past as e-mails on the console (the analysis that sends them runs
        # when the load commits, inside this call).
        mail_backend = settings.EMAIL_BACKEND
        settings.EMAIL_BACKEND = "django.core.mail.backends.dummy.EmailBackend"
        try:
            self._handle(**options)
        finally:
            settings.EMAIL_BACKEND = mail_backend

    def _handle(self, **options) -> None:
        if options["print_password"]:
            self.stdout.write(catalogue.DEMO_PASSWORD)
            return
        if options["list_logins"]:
            for line in demo.login_lines():
                self.stdout.write(line)
            return
        if not settings.DEBUG and not options["force"]:
            # The demo's logins share a published password, one of them a superuser.
            raise CommandError(
                "load_demo creates logins with a published password, so it runs only with DEBUG "
                "on. Pass --force to load it anyway, but never into a real facility's database."
            )
        if not 1 <= options["days"] <= 730:
            raise CommandError(f"--days={options['days']} is not valid: expected 1 to 730.")
        verbose = options["verbosity"] >= 1

        def progress(message: str) -> None:
            if verbose:
                self.stdout.write(message)

        with transaction.atomic():
            if demo.is_loaded():
                if not options["reset"]:
                    self.stdout.write(
                        "Demo data already loaded; nothing to do (use --reset to reload it)."
                    )
                    return
                removed = cleanup.delete_demo()
                progress(f"Removed the old demo data ({removed} rows).")
            outcomes = demo.load(
                history_days=options["days"],
                image_sessions=options["image_sessions"],
                progress=progress,
            )
        summary = ", ".join(
            f"{count} {name.replace('_', ' ')}" for name, count in sorted(outcomes.items())
        )
        self.stdout.write(self.style.SUCCESS(f"Demo facility loaded: {summary}."))
