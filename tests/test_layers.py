"""The layers of DESIGN.md, checked on the source: which app may import which.

people → instruments → bookings → logbook → {billing, upkeep, finder}; each app imports only
those to its left. micrograph imports nothing from Django or the apps. demo sits at the far right
and nothing imports it; api may use every app.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
ORDER = ["people", "instruments", "bookings", "logbook"]
LEAVES = {"billing", "upkeep", "finder"}


def allowed(app: str) -> set[str]:
    if app in ORDER:
        return set(ORDER[: ORDER.index(app)])
    if app in LEAVES:
        return set(ORDER)
    if app == "demo":
        return set(ORDER) | LEAVES | {"micrograph"}
    return set()


def imports_of(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def app_files(app: str):
    return [p for p in (ROOT / "facility" / app).rglob("*.py") if "migrations" not in p.parts]


APPS = sorted([*ORDER, *LEAVES, "demo"])


@pytest.mark.parametrize("app", APPS)
def test_apps_import_only_apps_to_their_left(app):
    wrong = []
    for path in app_files(app):
        for name in imports_of(path):
            parts = name.split(".")
            if parts[0] == "api":
                wrong.append(
                    f"{path.relative_to(ROOT)} imports {name} (the API sits above the apps)"
                )
            if parts[0] != "facility" or len(parts) < 2:
                continue
            other = parts[1]
            if other in {app, "errors", "config", "settings", "celery"}:
                continue
            if other == "micrograph" and app in {"logbook", "finder", "demo"}:
                continue  # the pure library may be used by the apps that analyse images
            if other not in allowed(app):
                wrong.append(f"{path.relative_to(ROOT)} imports {name}")
    assert not wrong, "\n".join(wrong)


def test_micrograph_is_pure():
    wrong = []
    for path in (ROOT / "facility" / "micrograph").rglob("*.py"):
        for name in imports_of(path):
            top = name.split(".")[0]
            if top in {"django", "facility", "api", "celery", "rest_framework"}:
                wrong.append(f"{path.relative_to(ROOT)} imports {name}")
    assert not wrong, "\n".join(wrong)


def test_nothing_imports_the_demo():
    wrong = []
    for path in [*ROOT.joinpath("facility").rglob("*.py"), *ROOT.joinpath("api").rglob("*.py")]:
        if "demo" in path.relative_to(ROOT).parts:
            continue
        if any(n.startswith("facility.demo") for n in imports_of(path)):
            wrong.append(str(path.relative_to(ROOT)))
    assert not wrong, "\n".join(wrong)
