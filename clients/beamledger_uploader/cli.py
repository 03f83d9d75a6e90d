"""Command line: `python -m beamledger_uploader watch FOLDER --session N | --instrument CODE`."""

from __future__ import annotations

import argparse
import hashlib
import os
import sys
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from .journal import Journal
from .runner import Fatal, Uploader
from .server import Backoff, Server

EXIT_OK, EXIT_RETRY_LATER, EXIT_CONFIG = 0, 1, 2


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="beamledger-uploader",
        description="Upload new micrographs from a folder to a Beamledger session.",
    )
    sub = p.add_subparsers(dest="command", required=True)
    w = sub.add_parser("watch", help="send every new image in FOLDER once it has stopped growing")
    w.add_argument("folder", type=Path)
    target = w.add_mutually_exclusive_group(required=True)
    target.add_argument("--session", type=int, help="session id to attach images to")
    target.add_argument(
        "--instrument", help="instrument code: attach to the session open on it at upload time"
    )
    w.add_argument("--server", help="Beamledger address (default: $BEAMLEDGER_URL)")
    w.add_argument(
        "--token-file", type=Path, help="file holding the API token (default: $BEAMLEDGER_TOKEN)"
    )
    w.add_argument("--once", action="store_true", help="one pass, then exit (for cron)")
    w.add_argument("--interval", type=float, default=5.0, help="seconds between scans (watch)")
    w.add_argument(
        "--settle", type=float, default=3.0, help="seconds a file must stay unchanged first"
    )
    w.add_argument("--journal", type=Path, help="journal file (default: in FOLDER, hidden)")
    w.add_argument("--recursive", action="store_true", help="look in subfolders too")
    return p


def _token(args: argparse.Namespace, env: Mapping[str, str]) -> str:
    if args.token_file:
        return args.token_file.read_text(encoding="utf-8").strip()
    return env.get("BEAMLEDGER_TOKEN", "").strip()


def default_journal(folder: Path, target: str) -> Path:
    # One journal per target, so pointing the same folder at a new session starts afresh.
    key = hashlib.sha256(target.encode()).hexdigest()[:10]
    return folder / f".beamledger-journal-{key}.jsonl"


def main(
    argv: Sequence[str] | None = None,
    *,
    env: Mapping[str, str] | None = None,
    say: Callable[[str], None] | None = None,
    sleep: Callable[[float], None] = time.sleep,
    clock: Callable[[], float] = time.monotonic,
) -> int:
    env = os.environ if env is None else env
    say = say or (lambda line: print(line, flush=True))
    args = parser().parse_args(argv)
    server_url = args.server or env.get("BEAMLEDGER_URL", "")
    token = _token(args, env)
    if not server_url or not token:
        say(
            "give the server (--server or $BEAMLEDGER_URL) and a token ($BEAMLEDGER_TOKEN or --token-file)"
        )
        return EXIT_CONFIG
    if not args.folder.is_dir():
        say(f"{args.folder} is not a folder")
        return EXIT_CONFIG
    target = (
        f"session {args.session}" if args.session is not None else f"instrument {args.instrument}"
    )
    # Cron runs again soon: a few tries are enough. Watching keeps trying until the server is back.
    backoff = Backoff(attempts=5 if args.once else None)
    server = Server(server_url, token, backoff=backoff, sleep=sleep, say=say)
    uploader = Uploader(
        folder=args.folder,
        server=server,
        url=server.upload_url(session=args.session, instrument=args.instrument),
        journal=Journal(args.journal or default_journal(args.folder, f"{server_url} {target}")),
        settle=args.settle,
        recursive=args.recursive,
        say=say,
        clock=clock,
    )
    say(f"watching {args.folder} for {target} on {server_url}")
    try:
        if args.once:
            waiting = uploader.scan()
            if waiting:
                sleep(args.settle)
                waiting = uploader.scan()
            say(uploader.summary(waiting))
            return EXIT_RETRY_LATER if uploader.tally["unreachable"] else EXIT_OK
        while True:
            uploader.scan()
            sleep(args.interval)
    except Fatal as exc:
        say(f"stopped: {exc}")
        return EXIT_CONFIG
    except KeyboardInterrupt:
        say(uploader.summary(0))
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
