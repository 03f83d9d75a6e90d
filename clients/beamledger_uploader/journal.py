"""The local journal: what was already sent, so nothing is sent twice.

JSON Lines, appended and flushed to disk after each file, so a crash loses at most the line being
written (a torn last line is ignored on reading). A file is known by its content's SHA-256; its
path, size and modification time let a rescan skip it without reading it again.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

# Outcomes that end a file's story: it is on the server, or the server refused it for good.
SENT = ("created", "existing", "duplicate")
REFUSED = "refused"


@dataclass(frozen=True)
class Entry:
    path: str
    size: int
    mtime_ns: int
    sha256: str
    outcome: str
    detail: str = ""
    micrograph: int | None = None
    session: int | None = None
    at: str = ""


class Journal:
    def __init__(self, path: Path) -> None:
        self.path = path
        self._by_hash: dict[str, Entry] = {}
        self._by_stat: dict[tuple[str, int, int], Entry] = {}
        self._load()

    def _load(self) -> None:
        if not self.path.exists():
            return
        with self.path.open(encoding="utf-8") as handle:
            for line in handle:
                try:
                    entry = Entry(**json.loads(line))
                except (ValueError, TypeError):
                    continue  # a line torn by a crash, or written by another version
                self._remember(entry)

    def _remember(self, entry: Entry) -> None:
        self._by_hash[entry.sha256] = entry
        self._by_stat[(entry.path, entry.size, entry.mtime_ns)] = entry

    def by_stat(self, path: str, size: int, mtime_ns: int) -> Entry | None:
        return self._by_stat.get((path, size, mtime_ns))

    def by_hash(self, sha256: str) -> Entry | None:
        return self._by_hash.get(sha256)

    def record(self, entry: Entry) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with self.path.open("a", encoding="utf-8") as handle:
            handle.write(json.dumps(entry.__dict__, sort_keys=True) + "\n")
            handle.flush()
            os.fsync(handle.fileno())
        self._remember(entry)

    def __len__(self) -> int:
        return len(self._by_hash)
