"""The printable statement (PDF, drawn with reportlab's platypus layout).

The header is the facility's own, from settings: FACILITY_NAME, plus BILLING_HEADER_LINES (a
list of address / tax-number lines; optional) and BILLING_PAYMENT_NOTE (optional). A draft is
marked on every page as not a bill; a final statement carries its number and checksum.
"""

from __future__ import annotations

import io
from decimal import ROUND_HALF_UP, Decimal
from xml.sax.saxutils import escape

from django.conf import settings
from django.utils import timezone
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, SimpleDocTemplate, Spacer, Table, TableStyle

from facility.billing import queries
from facility.billing.models import Statement


def _styles() -> dict[str, ParagraphStyle]:
    base = getSampleStyleSheet()
    return {
        "title": ParagraphStyle("title", parent=base["Title"], fontSize=16, alignment=0),
        "head": ParagraphStyle("head", parent=base["Normal"], fontSize=9, leading=11),
        "cell": ParagraphStyle("cell", parent=base["Normal"], fontSize=7.5, leading=9),
        "small": ParagraphStyle("small", parent=base["Normal"], fontSize=7, leading=9),
    }


def _hours(minutes: int) -> str:
    return str((Decimal(minutes) / 60).quantize(Decimal("0.01"), rounding=ROUND_HALF_UP))


def _header_lines() -> list[str]:
    lines = getattr(settings, "BILLING_HEADER_LINES", [])
    if isinstance(lines, str):
        lines = [part.strip() for part in lines.split("|") if part.strip()]
    return [str(line) for line in lines]


def statement_pdf(statement: Statement, *, compress: bool = True) -> bytes:
    """The statement as PDF bytes. `compress=False` leaves page text readable (for tests)."""
    statement = Statement.objects.select_related("account", "account__group", "finalised_by").get(
        pk=statement.pk
    )
    styles = _styles()
    buffer = io.BytesIO()
    draft = not statement.is_final
    title = f"Statement {statement.reference}" if not draft else "DRAFT statement — not a bill"
    doc = SimpleDocTemplate(
        buffer,
        pagesize=A4,
        leftMargin=15 * mm,
        rightMargin=15 * mm,
        topMargin=15 * mm,
        bottomMargin=18 * mm,
        title=title,
        author=settings.FACILITY_NAME,
        pageCompression=1 if compress else 0,
        invariant=1,  # the same statement gives the same bytes (no creation timestamp)
    )

    def on_page(canvas, document) -> None:
        canvas.saveState()
        canvas.setFont("Helvetica", 7)
        footer = f"{settings.FACILITY_NAME} · {statement.account.code} · {statement.month:%Y-%m}"
        if draft:
            footer += " · DRAFT, figures may still change"
        canvas.drawString(15 * mm, 10 * mm, footer)
        canvas.drawRightString(A4[0] - 15 * mm, 10 * mm, f"page {document.page}")
        canvas.restoreState()

    story: list = [Paragraph(escape(settings.FACILITY_NAME), styles["title"])]
    for line in _header_lines():
        story.append(Paragraph(escape(line), styles["head"]))
    story.append(Spacer(1, 5 * mm))
    story.append(Paragraph(escape(title), styles["title"]))
    account = statement.account
    facts = [
        ("Account", f"{account.code} — {account.name}"),
        ("Group", account.group.name),
        ("Month", f"{statement.month:%B %Y}"),
        ("Currency", statement.currency or "—"),
    ]
    if statement.is_final:
        finalised = timezone.localtime(statement.finalised_at, timezone.get_default_timezone())
        facts.append(("Finalised", f"{finalised:%Y-%m-%d %H:%M} by {statement.finalised_by}"))
    for label, value in facts:
        story.append(Paragraph(f"<b>{escape(label)}:</b> {escape(value)}", styles["head"]))
    story.append(Spacer(1, 4 * mm))

    zone = timezone.get_default_timezone()  # the facility's zone, whoever is looking
    rows: list[list] = [["Date", "Time", "Instrument", "User", "Detail", "Hours", "Amount"]]
    for line in queries.lines_of(statement):
        start = timezone.localtime(line.starts_at, zone) if line.starts_at else None
        end = timezone.localtime(line.ends_at, zone) if line.ends_at else None
        rows.append(
            [
                f"{start:%Y-%m-%d}" if start else "",
                f"{start:%H:%M}–{end:%H:%M}" if start and end else "",
                line.instrument.code if line.instrument_id else "",
                line.user.get_username() if line.user_id else "",
                Paragraph(escape(f"{line.get_kind_display()}. {line.description}"), styles["cell"]),
                "" if line.kind == "adjustment" else _hours(line.billed_minutes),
                str(line.amount),
            ]
        )
    rows.append(["", "", "", "", "Total", "", f"{statement.total} {statement.currency}".strip()])
    table = Table(
        rows,
        colWidths=[20 * mm, 21 * mm, 20 * mm, 24 * mm, 60 * mm, 12 * mm, 23 * mm],
        repeatRows=1,
    )
    table.setStyle(
        TableStyle(
            [
                ("FONT", (0, 0), (-1, 0), "Helvetica-Bold", 8),
                ("FONT", (0, 1), (-1, -1), "Helvetica", 7.5),
                ("FONT", (0, -1), (-1, -1), "Helvetica-Bold", 8.5),
                ("LINEBELOW", (0, 0), (-1, 0), 0.6, colors.black),
                ("LINEABOVE", (0, -1), (-1, -1), 0.6, colors.black),
                ("ALIGN", (5, 0), (6, -1), "RIGHT"),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("ROWBACKGROUNDS", (0, 1), (-1, -2), [colors.white, colors.whitesmoke]),
            ]
        )
    )
    story.append(table)
    story.append(Spacer(1, 5 * mm))
    if statement.is_final:
        story.append(
            Paragraph(f"Checksum (SHA-256 over the lines): {statement.checksum}", styles["small"])
        )
    note = getattr(settings, "BILLING_PAYMENT_NOTE", "")
    if note:
        story.append(Paragraph(escape(str(note)), styles["small"]))
    doc.build(story, onFirstPage=on_page, onLaterPages=on_page)
    return buffer.getvalue()
