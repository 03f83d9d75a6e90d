"""Charts for the usage pages, drawn with matplotlib (Agg, no display) and returned as SVG text.

Only `matplotlib.figure.Figure` is used, never pyplot, so no figure is kept in global state
(safe in web and worker threads). The SVG id salt is set once, at import, and the metadata date
is left out, so the same data always gives the same SVG. Hours are drawn as floats: this is
display only, never the money path.
"""

from __future__ import annotations

import datetime as dt
import io
from collections.abc import Iterable
from decimal import Decimal

import matplotlib

matplotlib.use("Agg")

from matplotlib import rcParams
from matplotlib.figure import Figure

from facility.billing.usage import MonthlyHours, UtilisationPoint

if rcParams["svg.hashsalt"] is None:
    rcParams["svg.hashsalt"] = "beamledger"


def _svg(fig: Figure) -> str:
    out = io.StringIO()
    fig.savefig(out, format="svg", metadata={"Date": None}, bbox_inches="tight")
    return out.getvalue()


def _months(values: Iterable[dt.date]) -> list[dt.date]:
    return sorted(set(values))


def monthly_hours_chart(rows: list[MonthlyHours], *, title: str = "Hours used per month") -> str:
    """Grouped bars: for each month, one bar per instrument (used hours). Returns SVG text."""
    months = _months(r.month for r in rows)
    instruments = sorted({r.instrument for r in rows})
    value = {(r.month, r.instrument): r.used_hours for r in rows}
    fig = Figure(figsize=(8, 3.6))
    ax = fig.add_subplot()
    width = 0.8 / max(1, len(instruments))
    for k, code in enumerate(instruments):
        xs = [i - 0.4 + width * (k + 0.5) for i in range(len(months))]
        heights = [float(value.get((m, code), Decimal(0))) for m in months]
        bars = ax.bar(xs, heights, width=width, label=code)
        for n, bar in enumerate(bars):
            bar.set_gid(f"bar-{code}-{months[n]:%Y-%m}")
    ax.set_xticks(range(len(months)), [f"{m:%b %Y}" for m in months], rotation=45, ha="right")
    ax.set_ylabel("hours")
    ax.set_title(title)
    if instruments:
        ax.legend(fontsize="small", frameon=False)
    ax.spines[["top", "right"]].set_visible(False)
    return _svg(fig)


def utilisation_chart(
    points: list[UtilisationPoint], *, title: str = "Utilisation (used ÷ bookable hours)"
) -> str:
    """One line per instrument over the months given (e.g. a year), in percent. Returns SVG."""
    months = _months(p.month for p in points)
    fig = Figure(figsize=(8, 3.6))
    ax = fig.add_subplot()
    for code in sorted({p.instrument for p in points}):
        series = {p.month: p.utilisation for p in points if p.instrument == code}
        ys = [float(series[m] * 100) if series.get(m) is not None else float("nan") for m in months]
        (line,) = ax.plot(range(len(months)), ys, marker="o", label=code)
        line.set_gid(f"utilisation-{code}")
    ax.axhline(100, color="0.6", linewidth=0.8, linestyle="--")
    ax.set_xticks(range(len(months)), [f"{m:%b %Y}" for m in months], rotation=45, ha="right")
    ax.set_ylabel("% of bookable hours")
    ax.set_ylim(bottom=0)
    ax.set_title(title)
    if points:
        ax.legend(fontsize="small", frameon=False)
    ax.spines[["top", "right"]].set_visible(False)
    return _svg(fig)
