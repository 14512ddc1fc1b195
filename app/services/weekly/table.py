"""The weekly summary's files: the summary document and the export table (one row per
shot, ``app.services.export_table``) as CSV, JSON and Parquet, and ``write_export`` for
every format (the HTML report is ``app.services.weekly.report``).

Every writer takes a binary stream and an optional ``progress(done, total)`` callback
counted in shots. ``write_export_file`` writes through ``app.services.files.write_atomically``,
so a reader never sees a half-written export.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path
from typing import Any, BinaryIO

import orjson

from app.advisory import ADVISORY_CAUTION
from app.plain import plain
from app.presentation.csv_writer import write_csv
from app.services.export_table import arrow_table, csv_columns, flag_dict, records, units_document
from app.services.files import write_atomically
from app.services.weekly.report import render_html
from app.services.weekly.summary import WeeklySummary, collector_paused
from app.times import campaign_zone, iso_text

Progress = Callable[[int, int], None]

EXPORT_FORMATS = ("csv", "json", "html", "parquet")
MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "json": "application/json",
    "html": "text/html; charset=utf-8",
    "parquet": "application/vnd.apache.parquet",
}
DOCUMENT_KIND = "wakeledger.weekly_summary"
DOCUMENT_VERSION = 2  # 2: inputs by column name in CSV and Parquet, flag_codes, other sections kept


def _dated(value: Any) -> Any:
    """Datetimes as ISO text with their offset (UTC with Z), the rest plain."""
    if isinstance(value, dict):
        return {k: _dated(v) for k, v in value.items()}
    if hasattr(value, "utcoffset") and hasattr(value, "astimezone"):
        return iso_text(value)
    return value


def summary_document(summary: WeeklySummary) -> dict[str, Any]:
    """The summary part of the JSON export (everything but the per-shot rows)."""
    prev = summary.previous
    document = plain(
        _dated(
            {
                "campaign": {
                    "slug": summary.campaign_slug,
                    "name": summary.campaign_name,
                    "timezone": summary.timezone,
                },
                "week": summary.week.label,
                "start_local": summary.start_local,
                "end_local": summary.end_local,
                "start_utc": summary.start_utc,
                "end_utc": summary.end_utc,
                "generated_at": summary.generated_at,
                "model_versions": summary.model_versions,
                "empty": summary.is_empty,
                "shot_count": summary.shot_count,
                "excluded_count": summary.excluded_count,
                "status_counts": summary.status_counts,
                "flag_counts": summary.flag_counts,
                "ranges": [asdict(r) for r in summary.ranges],
                "phase_stability": asdict(summary.phase_stability),
                "density_calibration": asdict(summary.density_calibration),
                "model_check": summary.model_check,
                "previous_week": {
                    "week": prev.week.label,
                    "shot_count": prev.shot_count,
                    "status_counts": prev.status_counts,
                    "flag_shot_counts": prev.flag_shot_counts,
                    "medians": prev.medians,
                    "delta": {
                        "shot_count": prev.delta_shot_count,
                        "status_counts": prev.delta_status_counts,
                        "flag_shot_counts": prev.delta_flag_shot_counts,
                        "medians": prev.delta_medians,
                    },
                },
                "caution": ADVISORY_CAUTION,
            }
        )
    )
    # Built directly: thousands of entries, already plain values.
    document["flagged_shots"] = [
        {
            "shot_id": s.shot_id,
            "taken_at": iso_text(s.taken_at),
            "status": s.status,
            "reasons": [flag_dict(f) for f in s.reasons],
        }
        for s in summary.flagged_shots
    ]
    return document


def json_document_bytes(document: Any) -> bytes:
    """Compact UTF-8 JSON of a tree of plain values (orjson; the standard encoder for what orjson
    refuses, integers beyond 64 bits kept in another section)."""
    try:
        return orjson.dumps(document)
    except TypeError:
        return json.dumps(document, ensure_ascii=False, allow_nan=False, separators=(",", ":")).encode("utf-8")


def write_table_csv(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    total = summary.shot_count
    columns = csv_columns(summary.shots, campaign_zone(summary.timezone))
    write_csv([columns], out, (lambda done: progress(done, total)) if progress else None)


def write_json(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    document = {
        "kind": DOCUMENT_KIND,
        "version": DOCUMENT_VERSION,
        "summary": summary_document(summary),
        "units": units_document(),
        "shots": list(records(summary.shots)),
    }
    out.write(json_document_bytes(document))
    if progress:
        progress(summary.shot_count, summary.shot_count)


def write_parquet(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    import pyarrow.parquet as pq

    metadata = {
        "wakeledger.kind": DOCUMENT_KIND,
        "wakeledger.summary": json.dumps(summary_document(summary), allow_nan=False),
    }
    table = arrow_table(summary.shots, metadata)
    if progress:
        progress(summary.shot_count // 2, summary.shot_count)
    pq.write_table(table, out, compression="zstd")
    if progress:
        progress(summary.shot_count, summary.shot_count)


def _write_html(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    out.write(render_html(summary).encode("utf-8"))
    if progress:
        progress(summary.shot_count, summary.shot_count)


WRITERS: dict[str, Callable[[WeeklySummary, BinaryIO, Progress | None], None]] = {
    "csv": write_table_csv,
    "json": write_json,
    "html": _write_html,
    "parquet": write_parquet,
}


def write_export(summary: WeeklySummary, fmt: str, out: BinaryIO, progress: Progress | None = None) -> None:
    if fmt not in WRITERS:
        raise ValueError(f"unknown export format {fmt!r}; choose one of {', '.join(EXPORT_FORMATS)}")
    with collector_paused():
        WRITERS[fmt](summary, out, progress)


def render_export(summary: WeeklySummary, fmt: str) -> bytes:
    buffer = io.BytesIO()
    write_export(summary, fmt, buffer)
    return buffer.getvalue()


def write_export_file(summary: WeeklySummary, fmt: str, path: Path, progress: Progress | None = None) -> Path:
    """Write the export to ``path`` atomically (never half-written)."""
    return write_atomically(path, lambda out: write_export(summary, fmt, out, progress))
