"""Talking to Beamledger: one upload, with retries and backoff while the server is away."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import requests

CONTENT_TYPES = {
    ".tif": "image/tiff",
    ".tiff": "image/tiff",
    ".png": "image/png",
    ".jpg": "image/jpeg",
    ".jpeg": "image/jpeg",
}
# Answers worth trying again later: the server is busy, restarting or overloaded.
TRANSIENT = {429, 500, 502, 503, 504}


class Unreachable(Exception):
    """The server did not answer, or answered that it is overloaded, after every retry."""


class Rejected(Exception):
    """The server refused the request; `status` and `message` say why."""

    def __init__(self, status: int, code: str, message: str) -> None:
        super().__init__(f"{status} {code}: {message}")
        self.status = status
        self.code = code
        self.message = message


@dataclass(frozen=True)
class Uploaded:
    created: bool
    micrograph: int
    session: int


@dataclass
class Backoff:
    """Exponential backoff: 1, 2, 4 … seconds, at most `cap`, for at most `attempts` tries."""

    first: float = 1.0
    cap: float = 60.0
    attempts: int | None = 6  # None: keep trying (watch mode)

    def delays(self):
        delay, tried = self.first, 1
        while self.attempts is None or tried < self.attempts:
            yield delay
            delay = min(delay * 2, self.cap)
            tried += 1


class Server:
    def __init__(
        self,
        base_url: str,
        token: str,
        *,
        backoff: Backoff | None = None,
        sleep: Callable[[float], None] = time.sleep,
        say: Callable[[str], None] = print,
        timeout: tuple[float, float] = (10.0, 600.0),
    ) -> None:
        self.base_url = base_url.rstrip("/")
        self.http = requests.Session()
        self.http.headers["Authorization"] = f"Bearer {token}"
        self.http.headers["User-Agent"] = "beamledger-uploader/1.0"
        self.backoff = backoff or Backoff()
        self.sleep = sleep
        self.say = say
        self.timeout = timeout

    def upload_url(self, *, session: int | None, instrument: str | None) -> str:
        if session is not None:
            return f"{self.base_url}/api/v1/sessions/{session}/micrographs/"
        return f"{self.base_url}/api/v1/instruments/{instrument}/micrographs/"

    def upload(self, url: str, path: Path) -> Uploaded:
        """POST one file; retries while the server is unreachable or overloaded."""
        delays = self.backoff.delays()
        while True:
            try:
                with path.open("rb") as handle:
                    content_type = CONTENT_TYPES.get(
                        path.suffix.lower(), "application/octet-stream"
                    )
                    response = self.http.post(
                        url, files={"file": (path.name, handle, content_type)}, timeout=self.timeout
                    )
            except requests.RequestException as exc:
                wait, reason = next(delays, None), f"server unreachable ({type(exc).__name__})"
            else:
                if response.status_code in (200, 201):
                    body = response.json()
                    return Uploaded(response.status_code == 201, body["id"], body["session"])
                if response.status_code not in TRANSIENT:
                    raise _rejected(response)
                wait = next(delays, None)
                reason = f"server answered {response.status_code}"
                retry_after = response.headers.get("Retry-After", "")
                if wait is not None and retry_after.isdigit():
                    wait = max(wait, float(retry_after))
            if wait is None:
                raise Unreachable(f"{reason}; giving up on {path.name} for now")
            self.say(f"{reason}; retrying {path.name} in {wait:g} s")
            self.sleep(wait)


def _rejected(response: requests.Response) -> Rejected:
    try:
        error = response.json()["error"]
        return Rejected(response.status_code, error["code"], error["message"])
    except (ValueError, KeyError, TypeError):
        return Rejected(response.status_code, "unknown", response.text[:200])
