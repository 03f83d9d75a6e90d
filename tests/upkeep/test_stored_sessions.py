"""Past records.IN_MEMORY_SESSIONS the database sums each counting window instead of Python:
both ways must give the same figures, to the last digit the pages and the audit show."""

from __future__ import annotations

import datetime as dt

import pytest

from facility.upkeep import audit, records, status
from tests.upkeep.conftest import at
from tests.upkeep.test_query_counts import build

pytestmark = pytest.mark.django_db


def _figures(instruments, now: dt.datetime) -> list[tuple]:
    out = []
    for instrument, counters in status.facility_status(instruments, now=now):
        for c in counters:
            out.append(
                (
                    instrument.code,
                    c.spec.label,
                    round(c.value, 9),
                    {k: round(v, 9) for k, v in c.rates.items()},
                    c.forecast,
                    [round(r.predicted, 9) for r in c.readings],
                )
            )
    return out


def test_summed_by_the_database_or_in_python_alike(facility, monkeypatch):
    instruments = build(facility, 3)
    now = at(60, 12)
    in_python = _figures(instruments, now)
    csv_python = audit.to_csv(
        audit.build_report(facility.sem, now.date() - dt.timedelta(days=59), now.date(), now=now)
    )
    monkeypatch.setattr(records, "IN_MEMORY_SESSIONS", 0)
    by_database = _figures(instruments, now)
    csv_database = audit.to_csv(
        audit.build_report(facility.sem, now.date() - dt.timedelta(days=59), now.date(), now=now)
    )
    assert by_database == in_python
    assert csv_database == csv_python
    # the fixture's sessions cross resets and readings, so prorated edges were counted too
    assert any(
        v > 0 for *_, v, _r, _f, _p in [(x[0], x[1], x[2], x[3], x[4], x[5]) for x in in_python]
    )
