"""The audit export of one instrument over a date range, as CSV and PDF.

What an auditor or a warranty claim asks for: every session with its hours, beam-on time and
vents; the service events; the meter readings beside the logbook's figure (the drift); and each
counter over time with its rating.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from dataclasses import dataclass, field

from django.conf import settings
from django.contrib.auth.models import AbstractBaseUser
from django.db.models import Q
from django.utils import timezone

from facility.errors import Invalid
from facility.instruments.models import Instrument
from facility.logbook.models import InstrumentSession
from facility.upkeep import queries
from facility.upkeep.counters import ReadingCheck, start_of_day
from facility.upkeep.models import ServiceEvent
from facility.upkeep.status import CounterStatus, instrument_status

# Points per counter in the "over time" table: weekly over a quarter, coarser over longer ranges.
SERIES_POINTS_MAX = 53


@dataclass
class AuditReport:
    instrument: Instrument
    first_day: dt.date
    last_day: dt.date
    generated_at: dt.datetime
    sessions: list[InstrumentSession]
    events: list[ServiceEvent]
    readings: list[tuple[str, ReadingCheck]]
    counters: list[CounterStatus]
    series_times: list[dt.datetime] = field(default_factory=list)
    series: dict[str, list[float]] = field(default_factory=dict)

    @property
    def start(self) -> dt.datetime:
        return start_of_day(self.first_day)

    @property
    def end(self) -> dt.datetime:
        """End of the last day (exclusive)."""
        return start_of_day(self.last_day + dt.timedelta(days=1))

    @property
    def totals(self) -> dict[str, float]:
        closed = [s for s in self.sessions if s.ended_at is not None]
        return {
            "sessions": len(self.sessions),
            "hours": sum(s.hours or 0.0 for s in closed),
            "beam_on_hours": sum(float(s.beam_on_hours or 0) for s in closed),
            "vent_cycles": sum(s.vent_cycles for s in closed),
        }


def _series_times(start: dt.datetime, end: dt.datetime) -> list[dt.datetime]:
    """Week ends from the start of the range, at most SERIES_POINTS_MAX, ending at `end`."""
    span = end - start
    step = max(dt.timedelta(weeks=1), span / (SERIES_POINTS_MAX - 1))
    times, t = [], start
    while t < end:
        times.append(t)
        t += step
    times.append(end)
    return times


def build_report(
    instrument: Instrument,
    first_day: dt.date,
    last_day: dt.date,
    *,
    now: dt.datetime | None = None,
) -> AuditReport:
    """Collect the audit of `instrument` from `first_day` to `last_day`, both included."""
    if last_day < first_day:
        raise Invalid("The last day comes before the first.", fields={"end": ["Before start."]})
    now = now or timezone.now()
    report = AuditReport(instrument, first_day, last_day, now, [], [], [], [])
    start, end = report.start, report.end
    report.sessions = list(
        InstrumentSession.objects.filter(instrument=instrument, started_at__lt=end)
        .filter(Q(ended_at__gt=start) | Q(ended_at__isnull=True))
        .select_related("operator", "account", "booking")
        .order_by("started_at", "pk")
    )
    report.events = list(queries.service_events(instrument, start=start, end=end))
    as_at = min(end, now)
    report.counters = instrument_status(instrument, now=as_at)
    for status in report.counters:
        for check in status.readings:
            if start <= check.reading.read_at < end:
                report.readings.append((status.spec.label, check))
    report.readings.sort(key=lambda item: item[1].reading.read_at)
    if start < as_at:
        report.series_times = _series_times(start, as_at)
        for status in report.counters:
            values = status.timeline.series(report.series_times)
            report.series[status.spec.label] = [v for _, v in values]
    return report


def local_time(t: dt.datetime | None) -> str:
    return "" if t is None else timezone.localtime(t).strftime("%Y-%m-%d %H:%M")


def _num(value: float | None, places: int = 2) -> str:
    return "" if value is None else f"{value:.{places}f}"


def counter_rows(report: AuditReport) -> tuple[list[str], list[list[str]]]:
    header = [
        "counter",
        "basis",
        "value",
        "unit",
        "counting since",
        "rated",
        "rating source",
        "warn %",
        "share %",
        "rate 4 wk /wk",
        "rate 12 wk /wk",
        "limit forecast",
        "meter drift",
    ]
    rows = []
    for s in report.counters:
        share = s.share
        rows.append(
            [
                s.spec.label,
                s.spec.basis,
                _num(s.value),
                s.spec.unit,
                local_time(s.since) + ("" if s.since_known else " (first logbook entry)"),
                _num(s.limit.rated, 1),
                s.limit.source,
                str(s.limit.warn_percent),
                "" if share is None else f"{share * 100:.1f}",
                _num(s.rates.get(4)),
                _num(s.rates.get(12)),
                s.forecast.describe(timezone.get_current_timezone()) if s.forecast else "no rating",
                _num(s.drift),
            ]
        )
    return header, rows


def session_rows(report: AuditReport) -> tuple[list[str], list[list[str]]]:
    header = [
        "session",
        "started",
        "ended",
        "hours",
        "beam-on hours",
        "vent cycles",
        "vacuum mode",
        "operator",
        "account",
        "purpose",
        "booking",
    ]
    rows = [
        [
            str(s.pk),
            local_time(s.started_at),
            local_time(s.ended_at) or "open",
            _num(s.hours),
            _num(None if s.beam_on_hours is None else float(s.beam_on_hours)),
            str(s.vent_cycles),
            s.vacuum_mode,
            s.operator.get_username(),
            s.account.code,
            s.purpose,
            str(s.booking_id or ""),
        ]
        for s in report.sessions
    ]
    return header, rows


def event_rows(report: AuditReport) -> tuple[list[str], list[list[str]]]:
    header = ["performed", "kind", "pump", "part", "performed by", "cost", "notes", "recorded by"]
    rows = [
        [
            local_time(e.performed_at),
            e.get_kind_display(),
            e.pump.name if e.pump_id else "",
            e.part,
            e.performed_by,
            "" if e.cost is None else f"{e.cost:.2f}",
            e.notes,
            e.recorded_by.get_username() if e.recorded_by_id else "",
        ]
        for e in report.events
    ]
    return header, rows


def reading_rows(report: AuditReport) -> tuple[list[str], list[list[str]]]:
    header = ["read", "counter", "meter", "logbook", "drift", "recorded by", "note"]
    rows = [
        [
            local_time(c.reading.read_at),
            label,
            _num(c.value),
            _num(c.predicted),
            f"{c.drift:+.2f}",
            c.reading.recorded_by.get_username() if c.reading.recorded_by_id else "",
            c.reading.note,
        ]
        for label, c in report.readings
    ]
    return header, rows


def series_rows(report: AuditReport) -> tuple[list[str], list[list[str]]]:
    labels = list(report.series)
    header = ["time", *labels]
    rows = [
        [local_time(t), *(_num(report.series[label][i]) for label in labels)]
        for i, t in enumerate(report.series_times)
    ]
    return header, rows


SECTIONS = (
    ("Counters at the end of the period", counter_rows),
    ("Sessions", session_rows),
    ("Service events", event_rows),
    ("Meter readings", reading_rows),
    ("Counters over time", series_rows),
)


def to_csv(report: AuditReport) -> str:
    """One CSV file in sections: a title row, a header row, the rows, then a blank row."""
    out = io.StringIO()
    writer = csv.writer(out)
    inst = report.instrument
    writer.writerow([f"{settings.FACILITY_NAME}: upkeep audit"])
    writer.writerow(["instrument", inst.code, inst.name, inst.get_emitter_type_display()])
    writer.writerow(["period", report.first_day.isoformat(), report.last_day.isoformat()])
    writer.writerow(["generated", local_time(report.generated_at)])
    totals = report.totals
    writer.writerow(
        [
            "totals",
            f"{totals['sessions']} sessions",
            f"{totals['hours']:.2f} h",
            f"{totals['beam_on_hours']:.2f} h beam-on",
            f"{totals['vent_cycles']} vent cycles",
        ]
    )
    writer.writerow([])
    for title, rows_of in SECTIONS:
        header, rows = rows_of(report)
        writer.writerow([f"# {title}"])
        writer.writerow(header)
        writer.writerows(rows)
        writer.writerow([])
    return out.getvalue()


def export_for(
    user: AbstractBaseUser | None,
    instrument: Instrument,
    first_day: dt.date,
    last_day: dt.date,
    *,
    fmt: str = "csv",
) -> tuple[bytes, str, str]:
    """The export a page or endpoint serves: (content, content type, file name). Staff only."""
    queries.may_view(user)
    if fmt not in ("csv", "pdf"):
        raise Invalid(f"Unknown export format {fmt!r}; use csv or pdf.")
    report = build_report(instrument, first_day, last_day)
    name = f"upkeep-{instrument.code}-{first_day:%Y%m%d}-{last_day:%Y%m%d}.{fmt}"
    if fmt == "csv":
        return to_csv(report).encode("utf-8"), "text/csv; charset=utf-8", name
    from facility.upkeep.audit_pdf import to_pdf  # reportlab only when a PDF is asked for

    return to_pdf(report), "application/pdf", name
