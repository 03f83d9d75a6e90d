"""Two mirrored groups: whatever group A's people ask of a list, nothing of group B comes back.

Every list endpoint, every query parameter the schema documents for it (each filter with values
from both sides, search, every ordering field both ways) and every page (page size 1, cursor
followed to the end) — as researcher A, leader A, researcher B and the external client. A new
filter without a value rule below fails the test, so it cannot go unchecked.
"""

from __future__ import annotations

import datetime as dt
import json
from urllib.parse import urlencode

import pytest
from django.urls import resolve
from django.utils import timezone

from facility.billing import services as billing
from facility.billing.models import Statement
from facility.logbook.models import Flag
from tests import factories as f
from tests.api.conftest import NOW, Side, World
from tests.api.endpoints import list_operations, schema_operations


def _extra_rows(side: Side) -> None:
    """A closed, coated session with a dismissed flag: more rows, more pages, more filters."""
    specimen = f.SpecimenFactory(
        owner=side.user, group=side.group, material="PCL fibres", material_class="polymer"
    )
    session = f.InstrumentSessionFactory(
        instrument=side.instrument,
        operator=side.user,
        account=side.account,
        started_at=NOW - dt.timedelta(days=3),
        specimen=specimen,
        coating=f.CoatingFactory(specimen=specimen, material="Au", thickness_nm=8),
        vacuum_mode="low",
    )
    Flag.objects.create(
        session=session,
        code="charging",
        severity="problem",
        message="Charging in 1 of 1 images.",
        dismissed_at=timezone.now(),
        dismissed_by=side.user,
        dismiss_reason="intended contrast",
    )


def _billing_rows(world: World) -> None:
    """Each side's March draft statement with the line of its closed session (_extra_rows)."""
    for side in (world.a, world.b):
        billing.add_tariff(
            instrument=side.instrument,
            rate_category="internal",
            purpose="own_use",
            hourly_rate="80.00",
            valid_from=dt.date(2031, 1, 1),
            by=world.facility.manager,
        )
        assert billing.draft_statement(account=side.account, month=dt.date(2031, 3, 1))


def fingerprints(side: Side) -> list[str]:
    """Strings that appear only in rows of this side."""
    return [
        side.user.username,
        side.account.code,
        side.group.name,
        side.specimen.name,
        side.micrograph.sha256,
        side.session.notes,
        side.token.prefix,
    ]


def values_for(name: str, schema: dict, world: World) -> list[str]:
    """Values to try for one query parameter: both sides' where it names a side."""
    a, b = world.a, world.b
    by_name = {
        "instrument": [a.instrument.code, b.instrument.code],
        "user": [a.user.username, b.user.username],
        "operator": [a.user.username, b.user.username],
        "owner": [a.user.username, b.user.username],
        "account": [a.account.code, b.account.code],
        "group": [a.group.pk, b.group.pk],
        "session": [a.session.pk, b.session.pk],
        "micrograph": [a.micrograph.pk, b.micrograph.pk],
        "sha256": [a.micrograph.sha256, b.micrograph.sha256],
        "material": ["alumina", "PCL"],
        "search": [a.specimen.name, b.specimen.name, "notes", "tif"],
        # Enum filters: the values the world's rows hold, so the filter selects something.
        "material_class": ["ceramic", "polymer"],
        "conductivity": ["insulating"],
        "form": ["bulk"],
        "coating": ["Au"],
        "flag": ["charging_risk"],
        "code": ["charging_risk", "charging"],
        "severity": ["warning", "problem"],
        "vacuum_mode": ["high", "low"],
        "purpose": ["own_use"],
        "state": ["requested", "done", "pending"],
        "level": ["warn", "limit"],
        "kind": ["use", "adjustment"],
        "month": ["2031-02", "2031-03"],
    }
    if name == "statement":
        return [
            Statement.objects.filter(account=side.account).values_list("pk", flat=True).first()
            for side in (a, b)
        ]
    kind = schema.get("items", schema)
    if "enum" in kind:
        chosen = [v for v in by_name.get(name, []) if v in kind["enum"]]
        return chosen or list(kind["enum"])[:2]
    if name in by_name:
        return by_name[name]
    if kind.get("type") == "boolean":
        return ["true", "false"]
    if kind.get("format") == "date-time":
        return [(NOW - dt.timedelta(days=2)).isoformat(), (NOW + dt.timedelta(days=8)).isoformat()]
    if kind.get("type") == "number" and name.endswith("_nm"):
        return [1, 1000]
    raise AssertionError(f"no test values for query parameter {name!r}: add a rule above")


def everything(api, path: str, params: dict) -> list[dict]:
    """All rows of a list, following the cursor page by page."""
    rows: list[dict] = []
    url = f"{path}?{urlencode(params)}"
    for _ in range(100):
        response = api.get(url)
        assert response.status_code == 200, (url, response.content[:300])
        body = response.json()
        rows += body["results"]
        if not body["next"]:
            return rows
        url = body["next"]
    raise AssertionError(f"{path} did not end after 100 pages")


def variations(path: str, operation: dict, world: World):
    yield {"page_size": 1}
    view = resolve(path).func.cls
    for field in getattr(view, "ordering_fields", None) or []:
        for sign in ("", "-"):
            yield {"ordering": sign + field, "page_size": 1}
    for parameter in operation.get("parameters", []):
        name = parameter["name"]
        if parameter["in"] != "query" or name in ("cursor", "page_size", "ordering"):
            continue
        for value in values_for(name, parameter["schema"], world):
            yield {name: value}


CASES = [
    # (who asks, their own side or None, the sides they must never see, every variation?)
    ("researcher_a", "a", ("b",), True),
    ("researcher_b", "b", ("a",), True),
    # The leader and the client go through the same visible_to; their full pages suffice.
    ("leader_a", "a", ("b",), False),
    ("client", None, ("a", "b"), False),
]
# Lists whose rows belong to no group (the instrument catalogue is the same for everyone).
SHARED = {"/api/v1/instruments/"}
# Lists of one person's own rows: only that person (the side's researcher) sees their side's.
PERSONAL = {"/api/v1/tokens/"}
# Staff-only lists (upkeep): no one else gets a row, whatever they ask — a 403 every time.
STAFF_ONLY = {"/api/v1/upkeep/alerts/"}
# Lists of rows only a group's leader (and staff) read, such as statements: a researcher sees
# neither side's, the leader their own group's — with every variation.
LEADERS = {"/api/v1/billing/statements/"}


@pytest.mark.parametrize("path", list_operations())
def test_lists_never_show_the_other_group(world, path):
    _extra_rows(world.a)
    _extra_rows(world.b)
    if path.startswith("/api/v1/billing/"):
        _billing_rows(world)
    operation = schema_operations()[("GET", path)]
    if path in STAFF_ONLY:
        for role, *_ in CASES:
            api = world.client_for(role)
            for params in variations(path, operation, world):
                response = api.get(f"{path}?{urlencode(params)}")
                assert response.status_code == 403, (role, path, params)
        return
    for role, own, forbidden, full in CASES:
        api = world.client_for(role)
        marks = [m for side in forbidden for m in fingerprints(getattr(world, side))]
        if path in PERSONAL and own and getattr(world, own).user != world.user(role):
            own = None
        if path in LEADERS:
            own = own if role == "leader_a" else None
            full = full or role == "leader_a"
        own_marks = fingerprints(getattr(world, own)) if own else []
        saw_own = False
        tried = variations(path, operation, world) if full else [{"page_size": 1}]
        for params in tried:
            for row in everything(api, path, params):
                text = json.dumps(row)
                leaked = [m for m in marks if m and m in text]
                assert not leaked, (role, path, params, leaked, row)
                saw_own = saw_own or any(m in text for m in own_marks)
        # The check is not vacuous: the same requests do return the caller's own side's rows.
        assert saw_own or not own or path in SHARED, (role, path)


def test_each_side_sees_its_own(world):
    """The mirror holds both ways, and neither side's list is empty."""
    for side, role in ((world.a, "researcher_a"), (world.b, "researcher_b")):
        api = world.client_for(role)
        sessions = everything(api, "/api/v1/sessions/", {})
        assert [s["id"] for s in sessions] == [side.session.pk]
        micrographs = everything(api, "/api/v1/micrographs/", {})
        assert [m["sha256"] for m in micrographs] == [side.micrograph.sha256]
        bookings = everything(api, "/api/v1/bookings/", {})
        assert [b["id"] for b in bookings] == [side.booking.pk]
