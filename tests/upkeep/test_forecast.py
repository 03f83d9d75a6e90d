"""The forecast: rates over 4 and 12 weeks, the date at each rate, and the spread between them."""

from __future__ import annotations

import datetime as dt
import json

import pytest

from facility.upkeep import forecast as fc
from facility.upkeep import queries, services
from facility.upkeep.models import Counter
from tests.upkeep.conftest import T0, add_session

NOW = dt.datetime(2025, 6, 2, 12, tzinfo=dt.UTC)
WEEK = dt.timedelta(weeks=1)


def test_constant_rate_gives_an_exact_date():
    # 120 of 200 h used at 10 h/week: 80 h left → exactly 8 weeks from now.
    result = fc.forecast(used=120, rated=200, rates={4: 10.0, 12: 10.0}, now=NOW)
    assert result.dates == {4: NOW + 8 * WEEK, 12: NOW + 8 * WEEK}
    assert result.central == NOW + 8 * WEEK
    assert result.plus_minus == dt.timedelta(0)
    assert result.share == pytest.approx(0.6)


def test_two_rates_give_a_spread():
    # 80 h left: at 10 h/week 8 weeks, at 5 h/week 16 weeks → 12 weeks ± 4 weeks.
    result = fc.forecast(used=120, rated=200, rates={4: 10.0, 12: 5.0}, now=NOW)
    assert result.earliest == NOW + 8 * WEEK
    assert result.latest == NOW + 16 * WEEK
    assert result.central == NOW + 12 * WEEK
    assert result.plus_minus == 4 * WEEK
    assert result.describe() == f"about {NOW + 12 * WEEK:%Y-%m-%d} ± 28 days"


def test_no_use_never_reaches_and_past_the_limit_is_not_forecast():
    idle = fc.forecast(used=50, rated=200, rates={4: 0.0, 12: 2.0}, now=NOW)
    # 150 h at 2 h/week = 75 weeks; at 0 h/week never, so the spread is unbounded.
    assert idle.dates == {4: None, 12: NOW + 75 * WEEK}
    assert idle.latest is None and not idle.bounded
    assert idle.central == NOW + 75 * WEEK
    over = fc.forecast(used=210, rated=200, rates={4: 10.0, 12: 10.0}, now=NOW)
    assert over.reached and over.earliest is None and over.remaining == 0
    with pytest.raises(ValueError):
        fc.forecast(used=1, rated=0, rates={}, now=NOW)


def test_rate_per_week():
    assert fc.rate_per_week(30, dt.timedelta(days=14)) == 15.0
    assert fc.rate_per_week(30, dt.timedelta(0)) is None


def test_forecast_on_a_constructed_history(facility, lab6):
    # Twelve weeks, one 10-hour session a week starting at T0 + k weeks: a constant 10 h/week.
    for k in range(12):
        add_session(facility, lab6, T0 + k * WEEK, 10)
    services.set_limit(
        instrument=lab6, counter=Counter.EMITTER_HOURS, rated=200, by=facility.manager
    )
    now = T0 + 12 * WEEK
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS), now=now)
    # Used 12 × 10 = 120 h; 4-week window holds sessions 8–11 (40 h), 12-week all (120 h).
    assert status.value == pytest.approx(120.0)
    assert status.rates == {4: 10.0, 12: 10.0}
    # 80 h left at 10 h/week: exactly 8 weeks after now, at both rates.
    assert status.forecast.dates == {4: now + 8 * WEEK, 12: now + 8 * WEEK}
    assert status.forecast.plus_minus == dt.timedelta(0)
    assert not status.limit.is_default
    # The same figures as plain JSON for the API and the dashboard.
    data = json.loads(json.dumps(status.as_dict()))
    assert data["value"] == 120.0 and data["share"] == 0.6 and data["state"] == "ok"
    assert data["rate_per_week"] == {"4": 10.0, "12": 10.0}
    assert data["forecast"]["at_rate"]["4"] == (now + 8 * WEEK).isoformat()
    assert data["forecast"]["plus_minus_days"] == 0.0


def test_short_history_rate_uses_the_data_it_has(facility, lab6):
    # Two weeks of data, 10 h each: the 12-week rate is over those two weeks, not diluted to 12.
    add_session(facility, lab6, T0, 10)
    add_session(facility, lab6, T0 + WEEK, 10)
    now = T0 + 2 * WEEK
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS), now=now)
    assert status.rates == {4: 10.0, 12: 10.0}


def test_default_rating_is_labelled_as_a_default(facility, lab6):
    status = queries.counter_status(queries.spec_for(lab6, Counter.EMITTER_HOURS))
    # LaB6: "hundreds to a thousand-plus hours" (DOMAIN.md, trade/memory) → default 1000 h.
    assert status.limit.rated == 1000.0
    assert status.limit.is_default
    assert "default" in status.limit.source and "set the rating" in status.limit.source
