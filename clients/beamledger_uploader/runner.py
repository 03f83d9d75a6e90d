"""One pass over the folder: send each image that has settled and was not sent before."""

from __future__ import annotations

import datetime as dt
import time
from collections import Counter
from collections.abc import Callable
from pathlib import Path

from .folder import Settling, images_in, sha256_of, stat_of
from .journal import REFUSED, Entry, Journal
from .server import Rejected, Server, Unreachable

# Refusals that are about the file itself: sending it again will not help.
FILE_REFUSED = {400, 413, 415}
# Refusals that are about the moment (no open session yet, session closed): try again later.
NOT_NOW = {409}


class Fatal(Exception):
    """The token or the target is wrong: nothing can be sent until a person fixes it."""


class Uploader:
    def __init__(
        self,
        *,
        folder: Path,
        server: Server,
        url: str,
        journal: Journal,
        settle: float,
        recursive: bool = False,
        say: Callable[[str], None] = print,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.folder = folder
        self.server = server
        self.url = url
        self.journal = journal
        self.settling = Settling(settle)
        self.recursive = recursive
        self.say = say
        self.clock = clock
        self.tally: Counter[str] = Counter()
        self._told_waiting: set[str] = set()

    def scan(self) -> int:
        """Send what is ready; returns how many files are still settling."""
        waiting = 0
        for path in images_in(self.folder, self.recursive):
            name = path.relative_to(self.folder).as_posix()
            size, mtime_ns = stat_of(path)
            if self.journal.by_stat(name, size, mtime_ns):
                continue
            looked_before = self.settling.has_seen(path)
            if not self.settling.ready(path, self.clock()):
                waiting += 1
                if looked_before and name not in self._told_waiting:
                    self.say(f"waiting: {name} is still being written")
                    self._told_waiting.add(name)
                continue
            try:
                self._send(path, name, size, mtime_ns)
            except Unreachable as exc:
                self.say(str(exc))
                self.tally["unreachable"] += 1
                return waiting  # the server is away: the other files would fail the same way
            self.settling.forget(path)
        return waiting

    def _send(self, path: Path, name: str, size: int, mtime_ns: int) -> None:
        digest = sha256_of(path)
        if stat_of(path) != (size, mtime_ns):
            return  # changed while being read: wait for it to settle again
        earlier = self.journal.by_hash(digest)
        if earlier is not None:
            self.say(f"already sent: {name} has the same bytes as {earlier.path}")
            self._record(
                name, size, mtime_ns, digest, "duplicate", earlier.micrograph, earlier.session
            )
            self.tally["duplicate"] += 1
            return
        try:
            result = self.server.upload(self.url, path)
        except Rejected as exc:
            if exc.status in FILE_REFUSED:
                self.say(f"refused: {name} — {exc.status} {exc.code}: {exc.message}")
                self._record(name, size, mtime_ns, digest, REFUSED, detail=exc.message)
                self.tally["refused"] += 1
                return
            if exc.status in NOT_NOW:
                self.say(f"not now: {name} — {exc.message} Will try again.")
                self.tally["not_now"] += 1
                return
            raise Fatal(f"{exc.status} {exc.code}: {exc.message}") from None
        outcome = "created" if result.created else "existing"
        if result.created:
            self.say(f"uploaded {name} → micrograph {result.micrograph} (session {result.session})")
        else:
            self.say(f"already on the server: {name} is micrograph {result.micrograph}")
        self._record(name, size, mtime_ns, digest, outcome, result.micrograph, result.session)
        self.tally[outcome] += 1

    def _record(
        self, name, size, mtime_ns, digest, outcome, micrograph=None, session=None, detail=""
    ):
        self.journal.record(
            Entry(
                path=name,
                size=size,
                mtime_ns=mtime_ns,
                sha256=digest,
                outcome=outcome,
                detail=detail,
                micrograph=micrograph,
                session=session,
                at=dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
            )
        )

    def summary(self, waiting: int) -> str:
        t = self.tally
        return (
            f"done: {t['created']} uploaded, {t['existing'] + t['duplicate']} already there, "
            f"{t['refused']} refused, {waiting} still being written"
            + (", server unreachable" if t["unreachable"] else "")
        )
