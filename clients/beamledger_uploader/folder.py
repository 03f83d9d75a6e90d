"""Finding image files in the watched folder, and telling when each has stopped growing."""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path

IMAGE_SUFFIXES = (".tif", ".tiff", ".png", ".jpg", ".jpeg")


@dataclass(frozen=True)
class Seen:
    size: int
    mtime_ns: int
    at: float  # when this (size, mtime) was first seen, on the monotonic clock


def images_in(folder: Path, recursive: bool = False) -> list[Path]:
    """Image files by name, oldest first; hidden files (the journal, editors' temp files) skipped."""
    pattern = "**/*" if recursive else "*"
    found = [
        p
        for p in folder.glob(pattern)
        if p.is_file()
        and p.suffix.lower() in IMAGE_SUFFIXES
        and not any(part.startswith(".") for part in p.relative_to(folder).parts)
    ]
    return sorted(found, key=lambda p: (p.stat().st_mtime_ns, p.name))


class Settling:
    """A file is ready once its size and modification time stay the same for `settle` seconds.

    The acquisition software writes an image over seconds (large TIFFs, slow network shares);
    sending it before the last byte lands would upload a truncated file.
    """

    def __init__(self, settle: float) -> None:
        self.settle = settle
        self._seen: dict[Path, Seen] = {}

    def ready(self, path: Path, now: float) -> bool:
        try:
            stat = path.stat()
        except FileNotFoundError:
            self._seen.pop(path, None)
            return False
        before = self._seen.get(path)
        if before is None or (before.size, before.mtime_ns) != (stat.st_size, stat.st_mtime_ns):
            self._seen[path] = Seen(stat.st_size, stat.st_mtime_ns, now)
            return False
        return stat.st_size > 0 and now - before.at >= self.settle

    def has_seen(self, path: Path) -> bool:
        return path in self._seen

    def forget(self, path: Path) -> None:
        self._seen.pop(path, None)


def sha256_of(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(1024 * 1024):
            digest.update(chunk)
    return digest.hexdigest()


def stat_of(path: Path) -> tuple[int, int]:
    stat = os.stat(path)
    return stat.st_size, stat.st_mtime_ns
