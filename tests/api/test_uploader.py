"""The acquisition-PC uploader (clients/), against a live test server.

Time is driven by the test: the uploader's sleep advances its clock, so "waits until a file stops
growing" and "retries with backoff" are checked without real waiting.
"""

from __future__ import annotations

import datetime as dt
import shutil

import pytest
from django.utils import timezone

from api import tokens
from clients.beamledger_uploader.cli import EXIT_CONFIG, EXIT_OK, EXIT_RETRY_LATER, main
from facility.logbook.models import Micrograph
from tests import factories as f
from tests.api.conftest import small_tiff
from tests.api.relay import Relay


class FakeTime:
    """The uploader's clock and sleep: sleeping moves the clock; `on_sleep` acts meanwhile."""

    def __init__(self) -> None:
        self.now = 0.0
        self.slept: list[float] = []
        self.on_sleep = None

    def clock(self) -> float:
        return self.now

    def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        if self.on_sleep:
            self.on_sleep(len(self.slept), seconds)
        self.now += seconds


@pytest.fixture
def session(live_server, facility):
    return f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_a,
        account=facility.account_a,
        started_at=timezone.now() - dt.timedelta(hours=1),
        ended_at=None,
        beam_on_hours=None,
    )


@pytest.fixture
def upload_token(facility) -> str:
    return tokens.create_token(user=facility.researcher_a, name="PC", scopes=["upload"]).secret


def run(folder, target: list[str], server: str, token: str, clock: FakeTime, *extra: str):
    lines: list[str] = []
    code = main(
        ["watch", str(folder), *target, "--server", server, "--once", "--settle", "2", *extra],
        env={"BEAMLEDGER_TOKEN": token},
        say=lines.append,
        sleep=clock.sleep,
        clock=clock.clock,
    )
    return code, lines


def test_once_sends_each_new_image_once(live_server, session, upload_token, tmp_path):
    (tmp_path / "grain-01.tif").write_bytes(small_tiff(31))
    (tmp_path / "grain-02.tif").write_bytes(small_tiff(32))
    (tmp_path / "notes.txt").write_text("not an image")
    target = ["--session", str(session.pk)]

    code, lines = run(tmp_path, target, live_server.url, upload_token, FakeTime())
    assert code == EXIT_OK, lines
    assert session.micrographs.count() == 2
    assert any(line.startswith("uploaded grain-01.tif → micrograph") for line in lines)
    assert lines[-1].startswith("done: 2 uploaded")

    code, again = run(tmp_path, target, live_server.url, upload_token, FakeTime())
    assert code == EXIT_OK
    assert not any(line.startswith("uploaded") for line in again)
    assert again[-1].startswith("done: 0 uploaded, 0 already there")

    # The same bytes under a new name are known by their hash: not sent at all.
    shutil.copy(tmp_path / "grain-01.tif", tmp_path / "grain-01 copy.tif")
    code, third = run(tmp_path, target, live_server.url, upload_token, FakeTime())
    assert "already sent: grain-01 copy.tif has the same bytes as grain-01.tif" in third
    assert session.micrographs.count() == 2


def test_a_growing_file_waits_until_it_stops(live_server, session, upload_token, tmp_path):
    whole = small_tiff(33)
    image = tmp_path / "scan.tif"
    image.write_bytes(whole[: len(whole) // 2])
    clock = FakeTime()
    # The acquisition software is still writing when the uploader looks again.
    clock.on_sleep = lambda n, s: image.write_bytes(whole) if n == 1 else None

    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, upload_token, clock
    )
    assert code == EXIT_OK
    assert "waiting: scan.tif is still being written" in lines
    assert session.micrographs.count() == 0

    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, upload_token, FakeTime()
    )
    assert session.micrographs.get().size_bytes == len(whole)  # the whole file, not half


def test_instrument_mode_attaches_to_the_open_session(live_server, facility, tmp_path):
    # Staff issue the acquisition PC a token of its own, upload-only, for this instrument.
    secret = tokens.create_instrument_token(
        instrument=facility.sem, name="fe-sem PC", by=facility.manager
    ).secret
    (tmp_path / "a.tif").write_bytes(small_tiff(34))
    target = ["--instrument", facility.sem.code]

    code, lines = run(tmp_path, target, live_server.url, secret, FakeTime())
    assert code == EXIT_OK
    assert any("no open session" in line and line.startswith("not now: a.tif") for line in lines)
    assert Micrograph.objects.count() == 0

    session = f.InstrumentSessionFactory(
        instrument=facility.sem,
        operator=facility.researcher_b,
        account=facility.account_b,
        ended_at=None,
        beam_on_hours=None,
    )
    code, lines = run(tmp_path, target, live_server.url, secret, FakeTime())
    assert code == EXIT_OK, lines
    assert Micrograph.objects.get().session == session


def test_retries_with_backoff_until_the_server_is_back(
    live_server, session, upload_token, tmp_path
):
    (tmp_path / "a.tif").write_bytes(small_tiff(35))
    relay = Relay(live_server.url)
    clock = FakeTime()
    # Sleep 1 is the settling wait; during sleep 3 (the second backoff) the server comes back.
    clock.on_sleep = lambda n, s: relay.start() if n == 3 else None
    try:
        code, lines = run(tmp_path, ["--session", str(session.pk)], relay.url, upload_token, clock)
    finally:
        relay.close()
    assert code == EXIT_OK, lines
    assert clock.slept == [2, 1, 2]  # settle, then backoff 1 s, 2 s
    assert "server unreachable (ConnectionError); retrying a.tif in 1 s" in lines
    assert session.micrographs.count() == 1


def test_gives_up_for_now_and_sends_on_the_next_run(live_server, session, upload_token, tmp_path):
    (tmp_path / "a.tif").write_bytes(small_tiff(36))
    relay = Relay(live_server.url)  # never started: the server stays down
    clock = FakeTime()
    try:
        code, lines = run(tmp_path, ["--session", str(session.pk)], relay.url, upload_token, clock)
    finally:
        relay.close()
    assert code == EXIT_RETRY_LATER
    assert clock.slept == [2, 1, 2, 4, 8]  # settle, then 4 backoffs: 5 attempts in all
    assert lines[-1].endswith("server unreachable")
    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, upload_token, FakeTime()
    )
    assert code == EXIT_OK
    assert session.micrographs.count() == 1


def test_a_refused_file_is_reported_and_not_sent_again(
    live_server, session, upload_token, tmp_path
):
    (tmp_path / "broken.tif").write_bytes(b"this is not a TIFF at all")
    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, upload_token, FakeTime()
    )
    assert code == EXIT_OK
    refusal = next(line for line in lines if line.startswith("refused: broken.tif"))
    assert "415 unsupported_type" in refusal
    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, upload_token, FakeTime()
    )
    assert not any(line.startswith("refused") for line in lines)


def test_a_bad_token_stops_with_a_clear_message(live_server, session, tmp_path):
    (tmp_path / "a.tif").write_bytes(small_tiff(37))
    code, lines = run(
        tmp_path, ["--session", str(session.pk)], live_server.url, "bl_wrong", FakeTime()
    )
    assert code == EXIT_CONFIG
    assert lines[-1] == "stopped: 401 unauthenticated: Unknown API token."
