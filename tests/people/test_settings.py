"""Settings refuse bad values at start with a message that names the variable."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _check(env: dict[str, str]) -> subprocess.CompletedProcess:
    full = {k: v for k, v in os.environ.items() if k not in {"DATABASE_URL", "DEBUG", "SECRET_KEY"}}
    full.update(env)
    return subprocess.run(
        [sys.executable, "manage.py", "check"], cwd=ROOT, env=full, capture_output=True, text=True
    )


@pytest.mark.parametrize(
    ("env", "named"),
    [
        ({"DEBUG": "maybe"}, "DEBUG"),
        ({"DEBUG": "0"}, "SECRET_KEY"),
        ({"DEBUG": "0", "SECRET_KEY": "short"}, "SECRET_KEY"),
        ({"TIME_ZONE": "Mars/Olympus"}, "TIME_ZONE"),
        ({"DATABASE_URL": "nosuchdb://x"}, "DATABASE_URL"),
        ({"UPLOAD_MAX_PIXELS": "lots"}, "UPLOAD_MAX_PIXELS"),
        ({"EMAIL_URL": "pigeon://loft"}, "EMAIL_URL"),
        ({"STORAGE_BACKEND": "floppy"}, "STORAGE_BACKEND"),
        ({"CACHE_URL": "bogus://x"}, "CACHE_URL"),
    ],
)
def test_bad_setting_fails_at_start_naming_the_variable(env, named):
    result = _check(env)
    assert result.returncode != 0
    assert named in result.stderr


def test_production_settings_start_with_a_real_key():
    result = _check({"DEBUG": "0", "SECRET_KEY": "x" * 50, "ALLOWED_HOSTS": "em.example.org"})
    assert result.returncode == 0, result.stderr


def test_defaults_use_sqlite_with_wal_and_immediate_transactions(settings):
    db = settings.DATABASES["default"]
    if db["ENGINE"] != "django.db.backends.sqlite3":
        pytest.skip("the default database is only in force when DATABASE_URL is unset")
    assert db["OPTIONS"]["transaction_mode"] == "IMMEDIATE"
    assert "journal_mode=WAL" in db["OPTIONS"]["init_command"]
