"""The weekly summary's files: the summary document and the export table (one row per
shot, ``app.services.export_table``) as CSV, JSON and Parquet, the summary's figures as CSV
(``app.services.weekly.summary_rows``), and ``write_export`` for every format (the HTML
report is ``app.services.weekly.report``).

Every writer takes a binary stream and an optional ``progress(done, total)`` callback
counted in shots. Files are written through ``app.services.files.write_atomically``
(``app.services.weekly.exports.WeekFile.write_file``), so a reader never sees a half-written export.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable
from dataclasses import asdict
from functools import partial
from typing import Any, BinaryIO
from zoneinfo import ZoneInfo

import orjson

from app.advisory import ADVISORY_CAUTION
from app.plain import plain
from app.presentation.csv_writer import write_csv
from app.services.export_table import ShotTable, arrow_table, csv_columns, record_json, units_document
from app.services.weekly.formats import EXPORT_FORMATS
from app.services.weekly.report import render_html
from app.services.weekly.summary import REASON_SEVERITIES, WeeklySummary, collector_paused, flagged_rows
from app.services.weekly.summary_rows import summary_csv_columns
from app.times import campaign_zone, iso_text, utc_texts

Progress = Callable[[int, int], None]

MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "json": "application/json",
    "html": "text/html; charset=utf-8",
    "parquet": "application/vnd.apache.parquet",
}
DOCUMENT_KIND = "wakeledger.weekly_summary"
DOCUMENT_VERSION = 2  # 2: inputs by column name in CSV and Parquet, flag_codes, other sections kept
JSON_CHUNK_SHOTS = 1000


def _dated(value: Any) -> Any:
    """Datetimes as ISO text with their offset (UTC with Z), the rest plain."""
    if isinstance(value, dict):
        return {k: _dated(v) for k, v in value.items()}
    if hasattr(value, "utcoffset") and hasattr(value, "astimezone"):
        return iso_text(value)
    return value


def summary_document(summary: WeeklySummary, *, flagged_shots: bool = True) -> dict[str, Any]:
    """The summary part of the JSON export (everything but the per-shot rows); the Parquet
    metadata's leaves out the list of flagged shots."""
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
    if not flagged_shots:
        return document
    # Built from the table (summary.flagged_shots, row by row): thousands of entries, whose reasons are
    # the flag objects the shots' own records carry.
    shots = summary.shots
    rows = flagged_rows(shots)
    flags = shots.flags.dicts
    taken_at = utc_texts([shots.taken_at[i] for i, _ in rows])
    document["flagged_shots"] = [
        {
            "shot_id": shots.shot_id[i],
            "taken_at": at,
            "status": status,
            "reasons": [f for f in flags[i] if f["severity"] in REASON_SEVERITIES],
        }
        for (i, status), at in zip(rows, taken_at, strict=True)
    ]
    return document


def json_document_bytes(document: Any) -> bytes:
    """Compact UTF-8 JSON of a tree of plain values (orjson; the standard encoder for what orjson
    refuses, integers beyond 64 bits kept in another section)."""
    try:
        return orjson.dumps(document)
    except TypeError:
        return json.dumps(document, ensure_ascii=False, allow_nan=False, separators=(",", ":")).encode("utf-8")


def write_shots_csv(shots: ShotTable, zone: ZoneInfo, out: BinaryIO, progress: Progress | None = None) -> None:
    """The shot CSV: the export table, one row per shot."""
    total = len(shots)
    write_csv([csv_columns(shots, zone)], out, (lambda done: progress(done, total)) if progress else None)


def _write_table_csv(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    write_shots_csv(summary.shots, campaign_zone(summary.timezone), out, progress)


def write_summary_csv(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    """The summary CSV: one row per figure of the week."""
    with collector_paused():
        write_csv([summary_csv_columns(summary)], out)
    if progress:
        progress(summary.shot_count, summary.shot_count)


def write_json(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    """The JSON document, its shots written JSON_CHUNK_SHOTS at a time (the same bytes as the whole
    document at once, without every shot's text alive together)."""
    document = {
        "kind": DOCUMENT_KIND,
        "version": DOCUMENT_VERSION,
        "summary": summary_document(summary),
        "units": units_document(),
        "shots": [],
    }
    head = json_document_bytes(document)
    out.write(head[: -len(b"]}")])  # the shots are the last member
    total = summary.shot_count
    for done in range(0, total, JSON_CHUNK_SHOTS):
        rows = slice(done, min(done + JSON_CHUNK_SHOTS, total))
        out.write(b"," if done else b"")
        out.write(b",".join(record_json(summary.shots, rows)))
        if progress:
            progress(rows.stop, total)
    out.write(b"]}")
    if progress and not total:
        progress(0, 0)


def write_parquet(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    import pyarrow.parquet as pq

    # The summary without its list of flagged shots: the rows are the shots, each with its status and
    # flags, and the list (9,000 entries in a week of 10,000 shots) would be stored twice in the footer
    # (as metadata and inside the Arrow schema), 20 MB and 200 MB of memory to write.
    metadata = {
        "wakeledger.kind": DOCUMENT_KIND,
        "wakeledger.summary": json_document_bytes(summary_document(summary, flagged_shots=False)).decode("utf-8"),
    }
    table = arrow_table(summary.shots, metadata)
    if progress:
        progress(summary.shot_count // 2, summary.shot_count)
    pq.write_table(table, out, compression="zstd")
    if progress:
        progress(summary.shot_count, summary.shot_count)


def write_html(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None, *, links: bool = False) -> None:
    """The HTML report (``links``: served by the API, it links to the week's other files)."""
    out.write(render_html(summary, links=links).encode("utf-8"))
    if progress:
        progress(summary.shot_count, summary.shot_count)


WRITERS: dict[str, Callable[[WeeklySummary, BinaryIO, Progress | None], None]] = {
    "csv": _write_table_csv,
    "json": write_json,
    "html": write_html,
    "parquet": write_parquet,
}


def write_export(
    summary: WeeklySummary, fmt: str, out: BinaryIO, progress: Progress | None = None, *, links: bool = False
) -> None:
    if fmt not in WRITERS:
        raise ValueError(f"unknown export format {fmt!r}; choose one of {', '.join(EXPORT_FORMATS)}")
    writer = partial(write_html, links=links) if fmt == "html" else WRITERS[fmt]
    with collector_paused():
        writer(summary, out, progress)


def render_export(summary: WeeklySummary, fmt: str) -> bytes:
    buffer = io.BytesIO()
    write_export(summary, fmt, buffer)
    return buffer.getvalue()
