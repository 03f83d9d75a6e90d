"""The README's configuration table lists every environment variable the settings read."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_setting_read_from_the_environment_is_in_the_readme_table():
    settings = (ROOT / "facility" / "settings.py").read_text()
    read = set(re.findall(r"\benv\.\w+\(\s*\"([A-Z][A-Z0-9_]*)\"", settings))
    readme = (ROOT / "README.md").read_text()
    table = set(re.findall(r"^\| `([A-Z][A-Z0-9_]*)` \|", readme, flags=re.MULTILINE))
    assert read, 'no env.<type>("NAME") calls found: has the settings reader changed?'
    assert read - table == set(), f"missing from README's Configuration table: {read - table}"
    assert table - read == set(), f"in README's table but not read by settings.py: {table - read}"


def test_quick_start_shows_exactly_the_two_commands():
    readme = (ROOT / "README.md").read_text()
    quick = readme.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    commands = re.findall(r"```sh\n(.*?)\n```", quick, flags=re.DOTALL)
    assert commands == ["make demo", "make test"]
