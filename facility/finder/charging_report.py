"""Charging rate by conductivity × coating × vacuum mode × voltage band, from the assessments.

One aggregate query: each analysed session is annotated with its highest voltage and whether any
of its images was assessed as charging, then grouped in the database.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

from django.conf import settings
from django.db.models import (
    Case,
    CharField,
    Count,
    Exists,
    IntegerField,
    Max,
    OuterRef,
    Q,
    Subquery,
    Sum,
    Value,
    When,
)

from facility.logbook.models import AnalysisState, Assessment, Conditions, InstrumentSession

# Voltage bands (kV): low-voltage imaging, the usual SEM range, and high voltage.
BANDS = [
    (0, 2, "< 2 kV"),
    (2, 5, "2–5 kV"),
    (5, 10, "5–10 kV"),
    (10, 20, "10–20 kV"),
    (20, 1000, "≥ 20 kV"),
]
BAND_LABELS = [label for _, _, label in BANDS]


@dataclass
class Cell:
    conductivity: str
    coated: str
    vacuum_mode: str
    band: str
    sessions: int
    charging: int

    @property
    def rate(self) -> float:
        return self.charging / self.sessions if self.sessions else 0.0


def charging_table() -> list[Cell]:
    from facility.micrograph.assess import ANALYSIS_VERSION

    charged = Assessment.objects.filter(
        micrograph__session=OuterRef("pk"),
        micrograph__state=AnalysisState.DONE,
        analysis_version=ANALYSIS_VERSION,
        charging_score__gte=settings.ANALYSIS_THRESHOLDS["charging_score"],
    )
    analysed = Assessment.objects.filter(
        micrograph__session=OuterRef("pk"), analysis_version=ANALYSIS_VERSION
    )
    top_kv = (
        Conditions.objects.filter(session=OuterRef("pk"))
        .values("session")
        .annotate(kv=Max("accelerating_voltage_kv"))
        .values("kv")
    )
    band = Case(
        *[When(kv__gte=lo, kv__lt=hi, then=Value(label)) for lo, hi, label in BANDS],
        default=Value("unknown"),
        output_field=CharField(),
    )
    coated = Case(
        When(Q(coating__isnull=True) | Q(coating__material="none"), then=Value("uncoated")),
        default=Value("coated"),
        output_field=CharField(),
    )
    rows = (
        InstrumentSession.objects.filter(specimen__isnull=False)
        .annotate(kv=Subquery(top_kv), any_analysed=Exists(analysed), any_charged=Exists(charged))
        .filter(any_analysed=True)
        .annotate(band=band, coated=coated)
        .values("specimen__conductivity", "coated", "vacuum_mode", "band")
        .annotate(
            sessions=Count("id"),
            charging=Sum(
                Case(When(any_charged=True, then=1), default=0, output_field=IntegerField())
            ),
        )
        .order_by("specimen__conductivity", "coated", "vacuum_mode", "band")
    )
    return [
        Cell(
            conductivity=r["specimen__conductivity"],
            coated=r["coated"],
            vacuum_mode=r["vacuum_mode"],
            band=r["band"],
            sessions=r["sessions"],
            charging=r["charging"] or 0,
        )
        for r in rows
    ]


def heat_map_svg(cells: list[Cell]) -> str:
    """A heat map of the charging rate: rows conductivity × coating, columns vacuum × band."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    rows = sorted({(c.conductivity, c.coated) for c in cells})
    vacua = sorted({c.vacuum_mode for c in cells})
    cols = [(v, b) for v in vacua for b in BAND_LABELS]
    grid = np.full((max(len(rows), 1), max(len(cols), 1)), np.nan)
    counts = {}
    for c in cells:
        if (c.conductivity, c.coated) in rows and (c.vacuum_mode, c.band) in cols:
            i, j = rows.index((c.conductivity, c.coated)), cols.index((c.vacuum_mode, c.band))
            grid[i, j] = c.rate
            counts[(i, j)] = f"{c.charging}/{c.sessions}"
    fig, ax = plt.subplots(figsize=(max(6, 0.9 * len(cols) + 2), max(2.5, 0.5 * len(rows) + 1.5)))
    image = ax.imshow(grid, cmap="viridis", vmin=0, vmax=1, aspect="auto")
    ax.set_xticks(range(len(cols)), [f"{v}\n{b}" for v, b in cols], fontsize=7)
    ax.set_yticks(range(len(rows)), [f"{c}, {k}" for c, k in rows], fontsize=8)
    for (i, j), text in counts.items():
        ax.text(
            j,
            i,
            text,
            ha="center",
            va="center",
            fontsize=7,
            color="white" if grid[i, j] < 0.6 else "black",
        )
    fig.colorbar(image, ax=ax, label="share of sessions with charging")
    ax.set_title("Charging by specimen, coating, vacuum mode and voltage")
    fig.tight_layout()
    out = io.StringIO()
    fig.savefig(out, format="svg")
    plt.close(fig)
    return out.getvalue()
