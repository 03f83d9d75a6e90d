"""``manage.py assess``: read micrograph files, extract their metadata and assess them.

Contract (other tools parse this output):
``python manage.py assess [--json] [--pixel-size-nm X] [--mapping FILE] FILE [FILE ...]``

With ``--json`` each file gives one JSON object on its own line, in input order. A file that
cannot be read or analysed gives ``{"file": ..., "error": ...}`` and the run goes on; the exit
status is 1 when any file failed. Without ``--json`` a readable table is printed. A progress bar
goes to stderr when there are more than a few files. The command touches no database.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from django.core.management.base import BaseCommand, CommandError, CommandParser
from tqdm import tqdm

from facility.micrograph.assess import assess
from facility.micrograph.metadata import MappingError, extract_metadata
from facility.micrograph.read import ImageReadError, read_image
from facility.micrograph.textblock import validate_mapping

# A bar for one or two files only flickers; past this many it tells the operator how far along.
PROGRESS_MIN_FILES = 3

# Keys every JSON line carries, in this order (the contract's list), before any extra keys.
CONTRACT_KEYS = (
    "file",
    "width",
    "height",
    "bit_depth",
    "pixel_size_nm",
    "pixel_size_source",
    "conditions",
    "sigma_px",
    "resolution_px",
    "resolution_nm",
    "astigmatism_ratio",
    "astigmatism_angle_deg",
    "charging_score",
    "evidence",
    "flags",
    "analysis_version",
)


def _finite(value: Any) -> Any:
    """JSON has no NaN or infinity: such numbers become null, recursively."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def assess_file(
    path: str,
    *,
    pixel_size_nm: float | None = None,
    mapping: dict | None = None,
    reference_width_mm: float | None = None,
    instrument_kind: str = "SEM",
) -> dict[str, Any]:
    """One output record for ``path``: the contract's keys, or ``{"file", "error"}``."""
    try:
        image = read_image(path)
    except ImageReadError as exc:
        return {"file": path, "error": str(exc)}
    meta = extract_metadata(
        image,
        mapping=mapping,
        pixel_size_nm=pixel_size_nm,
        reference_width_mm=reference_width_mm,
        instrument_kind=instrument_kind,
    )
    try:
        # Integer files name their top grey level (clipping, saturation); floats have none.
        top = image.header.bit_depth if image.header.dtype.startswith("uint") else None
        result = assess(image.data, pixel_size_nm=meta.pixel_size_nm, bit_depth=top).to_dict()
    except Exception as exc:  # one bad image must not stop a batch; the reason is reported
        return {"file": path, "error": f"analysis failed: {type(exc).__name__}: {exc}"}
    record: dict[str, Any] = {
        "file": path,
        "format": image.header.format,
        "width": image.header.width,
        "height": image.header.height,
        "bit_depth": image.header.bit_depth,
        "pixel_size_nm": meta.pixel_size_nm,
        "pixel_size_source": meta.pixel_size_source,
        "conditions": dict(meta.conditions),
        "suspect": dict(meta.suspect),
    }
    for key, value in result.items():
        record.setdefault(key, value)
    for key in CONTRACT_KEYS:
        record.setdefault(key, None)
    ordered = {key: record[key] for key in CONTRACT_KEYS}
    ordered.update((k, v) for k, v in record.items() if k not in ordered)
    return _finite(ordered)


def _number(value: Any, fmt: str) -> str:
    return "—" if value is None else format(value, fmt)


def format_table(records: Iterable[dict[str, Any]]) -> str:
    """A fixed-width table for people; the JSON output is the one for programs."""
    header = (
        "file",
        "size",
        "px nm (source)",
        "σ px",
        "res px",
        "res nm",
        "astig",
        "charging",
        "flags",
    )
    rows: list[tuple[str, ...]] = [header]
    for r in records:
        if "error" in r:
            rows.append((r["file"], f"ERROR: {r['error']}"))
            continue
        pixel = _number(r["pixel_size_nm"], ".4g")
        astig = _number(r["astigmatism_ratio"], ".2f")
        if r["astigmatism_angle_deg"] is not None and r["astigmatism_ratio"] is not None:
            astig += f" @{r['astigmatism_angle_deg']:.0f}°"
        rows.append(
            (
                r["file"],
                f"{r['width']}×{r['height']}×{r['bit_depth']}b",
                f"{pixel} ({r['pixel_size_source']})",
                _number(r["sigma_px"], ".2f"),
                _number(r["resolution_px"], ".2f"),
                _number(r["resolution_nm"], ".3g"),
                astig,
                _number(r["charging_score"], ".2f"),
                ",".join(r["flags"] or []) or "—",
            )
        )
    widths = [max(len(row[i]) for row in rows if len(row) == len(header)) for i in range(9)]
    lines = []
    for row in rows:
        if len(row) != len(header):
            lines.append(f"{row[0].ljust(widths[0])}  {row[1]}")
        else:
            lines.append("  ".join(cell.ljust(w) for cell, w in zip(row, widths, strict=True)))
    return "\n".join(line.rstrip() for line in lines)


class _RawStream:
    """Django's OutputWrapper appends a newline to every write; tqdm needs raw ``\\r`` writes."""

    def __init__(self, wrapper: Any) -> None:
        self._wrapper = wrapper

    def write(self, text: str) -> None:
        # Unstyled: on a terminal Django would paint every stderr write in its error colour.
        self._wrapper.write(text, style_func=lambda message: message, ending="")

    def flush(self) -> None:
        self._wrapper.flush()


class Command(BaseCommand):
    help = "Read micrograph files, extract metadata and assess resolution, astigmatism, charging."

    def add_arguments(self, parser: CommandParser) -> None:
        parser.add_argument("files", nargs="+", metavar="FILE", help="TIFF, PNG or JPEG files")
        parser.add_argument("--json", action="store_true", help="one JSON object per line")
        parser.add_argument(
            "--pixel-size-nm",
            type=float,
            default=None,
            metavar="X",
            help="pixel size to use, overriding anything in the files",
        )
        parser.add_argument(
            "--mapping",
            metavar="FILE",
            default=None,
            help='JSON mapping of metadata keys: {"key": {"field": ..., "unit": ...}}',
        )
        parser.add_argument(
            "--reference-width-mm",
            type=float,
            default=None,
            help="display width that magnification refers to (pixel size from magnification)",
        )
        parser.add_argument(
            "--instrument-kind",
            default="SEM",
            choices=["SEM", "ESEM", "TEM"],
            help="sets the plausible voltage range (default SEM)",
        )

    def handle(self, *args: Any, **options: Any) -> None:
        pixel_size = options["pixel_size_nm"]
        if pixel_size is not None and not (math.isfinite(pixel_size) and pixel_size > 0):
            raise CommandError(f"--pixel-size-nm must be a positive number, got {pixel_size}")
        reference = options["reference_width_mm"]
        if reference is not None and not (math.isfinite(reference) and reference > 0):
            raise CommandError(f"--reference-width-mm must be positive, got {reference}")
        mapping = self._load_mapping(options["mapping"])

        files: list[str] = options["files"]
        progress = tqdm(
            files,
            desc="assess",
            unit="file",
            file=_RawStream(self.stderr),
            disable=len(files) <= PROGRESS_MIN_FILES,
            leave=True,
        )
        records = []
        failed = 0
        for path in progress:
            record = assess_file(
                path,
                pixel_size_nm=pixel_size,
                mapping=mapping,
                reference_width_mm=reference,
                instrument_kind=options["instrument_kind"],
            )
            failed += "error" in record
            if options["json"]:
                # Written as it goes, so a long batch streams and a crash keeps earlier lines.
                self.stdout.write(json.dumps(record, ensure_ascii=False, allow_nan=False))
            else:
                records.append(record)
        progress.close()
        if not options["json"]:
            self.stdout.write(format_table(records))
        if failed:
            raise CommandError(f"{failed} of {len(files)} file(s) could not be assessed")

    def _load_mapping(self, path: str | None) -> dict | None:
        if path is None:
            return None
        try:
            mapping = json.loads(Path(path).read_text(encoding="utf-8"))
            validate_mapping(mapping)
        except OSError as exc:
            raise CommandError(f"cannot read mapping file {path}: {exc.strerror or exc}") from exc
        except ValueError as exc:  # JSONDecodeError and MappingError are both ValueErrors
            kind = "invalid mapping" if isinstance(exc, MappingError) else "mapping is not JSON"
            raise CommandError(f"{kind} in {path}: {exc}") from exc
        return mapping
