"""The upkeep pages read a fixed number of queries, however many instruments and counters.

Each instrument gets an emitter, two pumps (one counted in chamber hours, one in calendar time), a
rated wear part, resets, meter readings and sessions that straddle the resets, so every kind of
counter and every branch of the counting (reset, reading, origin, prorated edge) is read.
"""

from __future__ import annotations

from decimal import Decimal

import pytest
from django.db import connection
from django.test import Client
from django.test.utils import CaptureQueriesContext
from django.urls import reverse

from facility.instruments.models import EmitterType
from facility.upkeep import queries, services
from facility.upkeep.models import Counter, Limit, MeterReading, ServiceEvent, ServiceKind
from tests import factories as f
from tests.upkeep.conftest import add_session, at

pytestmark = pytest.mark.django_db

EMITTERS = [EmitterType.LAB6, EmitterType.SCHOTTKY, EmitterType.TUNGSTEN, EmitterType.COLD_FE]


def equip(facility, instrument, *, extra_pumps: int = 0, extra_parts: int = 0) -> None:
    """Counters of every kind on `instrument`, with resets, readings and sessions."""
    by = facility.manager
    turbo = f.PumpFactory(instrument=instrument, name="turbo", runs_continuously=False)
    f.PumpFactory(instrument=instrument, name="ion getter", runs_continuously=True)
    for n in range(extra_pumps):
        f.PumpFactory(instrument=instrument, name=f"extra {n}", runs_continuously=n % 2 == 0)
    for day in range(1, 50, 3):
        add_session(facility, instrument, at(day, 9), 3, beam=2.5, vents=2)
    # A session across the emitter change and the pump service below: prorated on both sides.
    add_session(facility, instrument, at(20, 7), 4, beam=3, vents=1)
    ServiceEvent.objects.create(
        instrument=instrument, kind=ServiceKind.EMITTER_CHANGE, performed_at=at(20, 8)
    )
    ServiceEvent.objects.create(
        instrument=instrument, kind=ServiceKind.PUMP_SERVICE, pump=turbo, performed_at=at(20, 9)
    )
    MeterReading.objects.create(
        instrument=instrument,
        counter=Counter.EMITTER_HOURS,
        value=Decimal("12.5"),
        read_at=at(30, 12),
        recorded_by=by,
    )
    MeterReading.objects.create(
        instrument=instrument,
        counter=Counter.PUMP_HOURS,
        pump=turbo,
        value=Decimal("40"),
        read_at=at(35, 12),
        recorded_by=by,
    )
    Limit.objects.create(
        instrument=instrument, counter=Counter.PUMP_HOURS, pump=turbo, rated=100, set_by=by
    )
    for n in range(1 + extra_parts):
        Limit.objects.create(
            instrument=instrument,
            counter=Counter.VENT_CYCLES,
            part=f"door-seal-{n}",
            rated=50,
            set_by=by,
        )
    ServiceEvent.objects.create(
        instrument=instrument,
        kind=ServiceKind.PART_REPLACEMENT,
        part="aperture-strip",
        performed_at=at(10, 8),
    )


def build(facility, count: int) -> list:
    """`count` instruments in all: the facility's own SEM and `count - 1` more."""
    equip(facility, facility.sem)
    instruments = [facility.sem]
    for n in range(1, count):
        inst = f.InstrumentFactory(code=f"inst-{n}", emitter_type=EMITTERS[n % len(EMITTERS)])
        equip(facility, inst)
        instruments.append(inst)
    return instruments


def queries_on(client, url: str) -> int:
    with CaptureQueriesContext(connection) as ctx:
        assert client.get(url).status_code == 200
    return len(ctx.captured_queries)


@pytest.fixture
def staff(facility) -> Client:
    c = Client()
    c.force_login(facility.manager)
    return c


# The checks are invariants, not figures: a page's query count must not depend on the number of
# rows it summarises (the N+1 pattern; Django docs, "Database access optimization"). The pinned
# totals follow the project's practice of pinning hot pages (STYLE.md).
#
# Upkeep records, read once for every instrument shown (records.py): pumps, limits, service
# events, meter readings, first session per instrument, closed sessions (counted, then read
# whole when there are few: records.IN_MEMORY_SESSIONS).
RECORDS = 7
# Sign-in session and user (2), active instruments, the records, open alerts, the navigation's
# unread count.
OVERVIEW_QUERIES = 2 + 1 + RECORDS + 1 + 1
# Sign-in (2), the instrument, the records, its open alerts, recent service events, recent meter
# readings, its limits, the navigation's unread count, the pump choices of the three forms.
INSTRUMENT_QUERIES = 2 + 1 + RECORDS + 1 + 3 + 1 + 3


def more_instruments(facility, count: int) -> None:
    for n in range(count):
        code = f"more-{n}"
        equip(facility, f.InstrumentFactory(code=code, emitter_type=EMITTERS[n % len(EMITTERS)]))


def test_overview_queries_do_not_grow_with_instruments(facility, clock, staff):
    build(facility, 2)
    two = queries_on(staff, reverse("upkeep"))
    more_instruments(facility, 3)
    five = queries_on(staff, reverse("upkeep"))
    print(f"\nupkeep overview: {two} queries with 2 instruments, {five} with 5")
    assert two == five == OVERVIEW_QUERIES


def test_instrument_page_queries_do_not_grow_with_counters(facility, clock, staff):
    build(facility, 2)
    url = reverse("upkeep-instrument", args=[facility.sem.code])
    two = queries_on(staff, url)
    more_instruments(facility, 3)
    crowded = f.InstrumentFactory(code="crowded", emitter_type=EmitterType.LAB6)
    equip(facility, crowded, extra_pumps=3, extra_parts=3)
    six = queries_on(staff, url)
    many = queries_on(staff, reverse("upkeep-instrument", args=[crowded.code]))
    print(
        f"\nupkeep instrument page: {two} queries with 2 instruments, {six} with 6, "
        f"{many} for one with 5 pumps and 5 wear parts"
    )
    assert two == six == many == INSTRUMENT_QUERIES


def test_counters_panel_and_exports_do_not_grow_with_counters(facility, clock, staff):
    build(facility, 1)
    crowded = f.InstrumentFactory(code="crowded", emitter_type=EmitterType.LAB6)
    equip(facility, crowded, extra_pumps=3, extra_parts=3)
    audit = "?first_day=2025-03-01&last_day=2025-04-30&format=csv"
    counts = {
        code: (
            queries_on(staff, reverse("instrument-detail", args=[code])),
            queries_on(staff, reverse("upkeep-audit", args=[code]) + audit),
        )
        for code in (facility.sem.code, crowded.code)
    }
    print(f"\ninstrument page with upkeep panel, audit export: {counts}")
    assert counts[facility.sem.code] == counts[crowded.code]


def test_daily_check_queries_do_not_grow_with_instruments(facility, clock):
    build(facility, 2)
    services.check_limits()  # raise the alerts once, so the counted runs only look
    with CaptureQueriesContext(connection) as two:
        services.check_limits()
    more_instruments(facility, 3)
    services.check_limits()
    with CaptureQueriesContext(connection) as five:
        services.check_limits()
    print(f"\ndaily check: {len(two)} queries with 2 instruments, {len(five)} with 5")
    # Instruments, the records, and one look for the crossings already alerted.
    assert len(two) == len(five) == 1 + RECORDS + 1


def test_the_fixtures_count_for_real(facility, clock):
    """The instruments above exercise real counting: one value worked out by hand."""
    build(facility, 1)
    spec = queries.spec_for(facility.sem, Counter.VENT_CYCLES, part="door-seal-0")
    # No replacement of door-seal-0: every vent since the first session. Sessions every third day
    # from day 1 to day 49 (17 sessions x 2 vents) plus the one across the emitter change (1):
    # 35 (by hand).
    assert queries.counter_status(spec).value == pytest.approx(35.0)
