"""When will a counter reach its limit? Pure arithmetic, no database.

Method: linear extrapolation of recent use (the usual "run rate" projection of maintenance
planning; common practice, no source). The rate is measured over two trailing windows, 4 and 12
weeks; the limit date is projected at each rate, and the spread between the two dates is the
uncertainty: a steady instrument gives two close dates, a changing one two far-apart dates.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field

# Trailing windows, in weeks, over which the recent rate is measured.
WINDOWS_WEEKS: tuple[int, ...] = (4, 12)

WEEK = dt.timedelta(weeks=1)


def rate_per_week(used: float, span: dt.timedelta) -> float | None:
    """Use per week over a window of length `span`; None when the window is empty."""
    if span <= dt.timedelta(0):
        return None
    return used / (span / WEEK)


def reach_time(
    *, used: float, rated: float, per_week: float | None, now: dt.datetime
) -> dt.datetime | None:
    """When `used` grows to `rated` at `per_week`; None when it never does at that rate.

    A counter already at or past its rating returns None too: it is not forecast, it is over.
    """
    remaining = rated - used
    if remaining <= 0 or per_week is None or per_week <= 0:
        return None
    return now + WEEK * (remaining / per_week)


@dataclass(frozen=True)
class Forecast:
    used: float
    rated: float
    now: dt.datetime
    rates: dict[int, float | None]
    dates: dict[int, dt.datetime | None] = field(default_factory=dict)

    @property
    def reached(self) -> bool:
        return self.used >= self.rated

    @property
    def remaining(self) -> float:
        return max(self.rated - self.used, 0.0)

    @property
    def share(self) -> float:
        return self.used / self.rated

    @property
    def earliest(self) -> dt.datetime | None:
        known = [d for d in self.dates.values() if d is not None]
        return min(known) if known else None

    @property
    def latest(self) -> dt.datetime | None:
        """The later date, or None when one of the rates never reaches the limit."""
        if not self.dates or any(d is None for d in self.dates.values()):
            return None
        return max(self.dates.values())  # type: ignore[type-var]

    @property
    def bounded(self) -> bool:
        """Both rates reach the limit, so the spread between their dates is finite."""
        return self.latest is not None

    @property
    def central(self) -> dt.datetime | None:
        """Midway between the two dates (or the only finite one)."""
        if self.earliest is None:
            return None
        if self.latest is None:
            return self.earliest
        return self.earliest + (self.latest - self.earliest) / 2

    @property
    def plus_minus(self) -> dt.timedelta | None:
        """Half the spread between the two dates: the forecast is `central ± plus_minus`."""
        if self.earliest is None or self.latest is None:
            return None
        return (self.latest - self.earliest) / 2

    def describe(self, tz: dt.tzinfo | None = None) -> str:
        """One line for people: the forecast and how sure it is (dates in `tz` when given)."""
        if self.reached:
            return "rated life reached"
        if self.earliest is None:
            return "no recent use: no forecast"
        central = self.central
        assert central is not None
        if tz is not None:
            central = central.astimezone(tz)
        text = f"about {central:%Y-%m-%d}"
        spread = self.plus_minus
        if spread is None:
            text += " (at the faster rate; the slower rate never reaches it)"
        elif spread >= dt.timedelta(days=1):
            text += f" ± {spread.days} days"
        return text


def forecast(
    *, used: float, rated: float, rates: Mapping[int, float | None], now: dt.datetime
) -> Forecast:
    """Project the date the rating is reached at each recent rate (hours or cycles per week)."""
    if rated <= 0:
        raise ValueError("rated must be positive")
    dates = {
        weeks: reach_time(used=used, rated=rated, per_week=per_week, now=now)
        for weeks, per_week in rates.items()
    }
    return Forecast(used=used, rated=rated, now=now, rates=dict(rates), dates=dates)
