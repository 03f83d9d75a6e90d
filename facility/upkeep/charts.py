"""Charts (matplotlib, Agg): a counter over time with its limit line and forecast.

Figures are built with matplotlib's object API (no pyplot), so nothing depends on a global backend
or GUI and worker threads do not share state. SVG for pages, PNG for the PDF export.
"""

from __future__ import annotations

import datetime as dt
import io

import matplotlib

matplotlib.use("Agg")  # no display on servers; set before anything imports pyplot

from django.utils import timezone
from matplotlib import dates as mdates
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from facility.upkeep.status import CounterStatus

# Forecast lines further out than this are cut at the edge: a limit years away needs no line.
MAX_HORIZON = dt.timedelta(days=2 * 365)
RATE_STYLES = {4: ("tab:orange", "--"), 12: ("tab:green", ":")}


def sample_points(
    start: dt.datetime, end: dt.datetime, *, count: int, extra: list[dt.datetime]
) -> list[dt.datetime]:
    """`count` even steps from start to end, plus the moments a reset or reading changes the line
    (each taken a microsecond before and at the event, so the jump shows as a jump)."""
    if end <= start:
        return [end]
    step = (end - start) / max(count - 1, 1)
    points = {start + step * i for i in range(count)}
    for t in extra:
        if start < t <= end:
            points.update({t - dt.timedelta(microseconds=1), t})
    return sorted(points)


def counter_chart(
    status: CounterStatus,
    *,
    start: dt.datetime | None = None,
    end: dt.datetime | None = None,
    points: int = 60,
    fmt: str = "svg",
) -> bytes:
    """The counter from `start` (default: the current part's start) to `end` (default: now),
    its limit and warn lines, and the forecast at each recent rate."""
    now = status.now
    end = min(end or now, now)
    start = start or status.since or (end - dt.timedelta(weeks=26))
    timeline = status.timeline
    events = [e.performed_at for e in timeline.resets] + [r.read_at for r in timeline.readings]
    series = timeline.series(sample_points(start, end, count=points, extra=events))
    spec, info = status.spec, status.limit

    fig = Figure(figsize=(8, 3.6), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.plot([t for t, _ in series], [v for _, v in series], color="tab:blue", label=spec.label)
    right = end
    if info.rated is not None:
        tag = "default" if info.is_default else "set by facility"
        ax.axhline(info.rated, color="tab:red", label=f"limit {info.rated:g} {spec.unit} ({tag})")
        if info.warn_at is not None:
            ax.axhline(
                info.warn_at,
                color="tab:red",
                linestyle=":",
                alpha=0.6,
                label=f"warn at {info.warn_percent}%",
            )
    forecast = status.forecast
    if forecast is not None and end == now and not forecast.reached:
        for weeks, reach in forecast.dates.items():
            if reach is None:
                continue
            color, style = RATE_STYLES.get(weeks, ("tab:gray", "--"))
            stop = min(reach, now + MAX_HORIZON)
            rate = forecast.rates[weeks] or 0.0
            top = status.value + rate * ((stop - now) / dt.timedelta(weeks=1))
            ax.plot(
                [now, stop],
                [status.value, top],
                color=color,
                linestyle=style,
                label=f"forecast at {weeks}-week rate: {reach:%Y-%m-%d}",
            )
            right = max(right, stop)
    for event in timeline.resets:
        if start <= event.performed_at <= right:
            ax.axvline(event.performed_at, color="gray", linewidth=0.8, alpha=0.6)
    ax.set_xlim(start, right)
    ax.set_ylim(bottom=0)
    ax.set_ylabel(spec.unit)
    ax.set_title(f"{spec.instrument.name} — {spec.label}", fontsize=10)
    # Dates in the facility's time zone, as on every other page.
    locator = mdates.AutoDateLocator(tz=timezone.get_current_timezone())
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(
        mdates.ConciseDateFormatter(locator, tz=timezone.get_current_timezone())
    )
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else None
    # Text stays text in SVG (searchable, selectable, smaller); the salt makes ids repeatable.
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "beamledger"}):
        fig.savefig(buffer, format=fmt, metadata=metadata)
    return buffer.getvalue()
