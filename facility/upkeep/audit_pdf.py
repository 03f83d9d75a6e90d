"""The audit export as PDF (reportlab platypus): the same sections as the CSV, plus the charts."""

from __future__ import annotations

import io
from xml.sax.saxutils import escape

from django.conf import settings
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4, landscape
from reportlab.lib.styles import getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import (
    Image,
    LongTable,
    PageBreak,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
)

from facility.upkeep.audit import SECTIONS, AuditReport, local_time
from facility.upkeep.charts import counter_chart

PAGE = landscape(A4)
MARGIN = 12 * mm
# A long free-text cell (notes, rating source) would make one row a page tall.
CELL_CHARS = 80
SHORT = 18


def _table(header: list[str], rows: list[list[str]], style) -> LongTable:
    small = style["BodyText"].clone("cell", fontSize=7, leading=8.5)
    data = [[Paragraph(f"<b>{escape(h)}</b>", small) for h in header]]
    for row in rows:
        cells = [c if len(c) <= CELL_CHARS else c[: CELL_CHARS - 1] + "…" for c in row]
        # Paragraphs wrap but cost ~1 ms each to lay out; short cells stay plain strings, so a
        # year of sessions renders in seconds.
        data.append([Paragraph(escape(c), small) if len(c) > SHORT else c for c in cells])
    width = (PAGE[0] - 2 * MARGIN) / max(len(header), 1)
    table = LongTable(data, colWidths=[width] * len(header), repeatRows=1)
    table.setStyle(
        [
            ("GRID", (0, 0), (-1, -1), 0.25, colors.grey),
            ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#e8eef4")),
            ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("FONTSIZE", (0, 1), (-1, -1), 7),
            ("LEADING", (0, 1), (-1, -1), 8.5),
        ]
    )
    return table


def to_pdf(report: AuditReport) -> bytes:
    styles = getSampleStyleSheet()
    inst = report.instrument
    totals = report.totals
    story: list = [
        Paragraph(escape(f"{settings.FACILITY_NAME}: upkeep audit — {inst.name}"), styles["Title"]),
        Paragraph(
            escape(
                f"Instrument {inst.code} ({inst.get_emitter_type_display()}); period "
                f"{report.first_day:%Y-%m-%d} to {report.last_day:%Y-%m-%d}; generated "
                f"{local_time(report.generated_at)}. {totals['sessions']} sessions, "
                f"{totals['hours']:.2f} h, {totals['beam_on_hours']:.2f} h beam-on, "
                f"{totals['vent_cycles']} vent cycles."
            ),
            styles["BodyText"],
        ),
        Spacer(1, 4 * mm),
    ]
    for title, rows_of in SECTIONS:
        header, rows = rows_of(report)
        story.append(Paragraph(escape(title), styles["Heading2"]))
        story.append(_table(header, rows, styles) if rows else Paragraph("None.", styles["Normal"]))
        story.append(Spacer(1, 4 * mm))
    if report.counters and report.start < report.end:
        story.append(PageBreak())
        story.append(Paragraph("Counters over the period", styles["Heading2"]))
        for status in report.counters:
            png = counter_chart(status, start=report.start, end=report.end, fmt="png", points=40)
            story.append(Image(io.BytesIO(png), width=220 * mm, height=99 * mm))
    buffer = io.BytesIO()
    doc = SimpleDocTemplate(
        buffer,
        pagesize=PAGE,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=MARGIN,
        bottomMargin=MARGIN,
        title=f"Upkeep audit {inst.code}",
        author=settings.FACILITY_NAME,
    )
    doc.build(story)
    return buffer.getvalue()
