"""Writers of the weekly summary: CSV (one row per shot), JSON (summary and shots),
a self-contained HTML report (inline CSS and SVG charts, no script, prints cleanly)
and Parquet (pyarrow, typed columns for pandas).

Every writer takes a binary stream and an optional ``progress(done, total)`` callback
counted in shots. ``write_export_file`` writes through ``app.services.files.write_atomically``,
so a reader never sees a half-written export.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Callable, Iterator
from dataclasses import asdict
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any, BinaryIO
from zoneinfo import ZoneInfo

import numpy as np
from jinja2 import Environment, PackageLoader, select_autoescape

from app.advisory import ADVISORY_CAUTION, add_caution_global
from app.services import report_charts as charts
from app.services.charts import STATUS_STYLES
from app.services.files import write_atomically
from app.services.ingest import format_utc
from app.services.phase_spread import NEIGHBOUR_WINDOW_SHOTS
from app.services.summary import (
    INPUT_PATHS,
    NOT_EVALUATED,
    OUTPUT_NAMES,
    STATUSES,
    WeeklySummary,
    WeekShots,
    collector_paused,
    is_text_input,
    unit_of,
)

Progress = Callable[[int, int], None]

EXPORT_FORMATS = ("csv", "json", "html", "parquet")
MEDIA_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "json": "application/json",
    "html": "text/html; charset=utf-8",
    "parquet": "application/vnd.apache.parquet",
}
DOCUMENT_KIND = "wakeledger.weekly_summary"
DOCUMENT_VERSION = 1
_CHUNK = 1000  # shots between progress reports


def export_file_name(campaign_slug: str, week_label: str, fmt: str) -> str:
    return f"wakeledger-{campaign_slug}-{week_label}.{fmt}"


# --- plain values --------------------------------------------------------------


def _iso(t: datetime) -> str:
    """ISO 8601: UTC as the API writes it (Z suffix), local times with their offset."""
    return format_utc(t) if t.utcoffset() == timedelta(0) else t.isoformat()


def _clean(value: Any) -> Any:
    """JSON-ready: numpy scalars to Python, NaN/inf to None, datetimes to ISO text."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, datetime):
        return _iso(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def _float_list(values: np.ndarray) -> list[float | None]:
    """Floats with NaN as None, fast for whole columns."""
    out = values.tolist()
    bad = np.flatnonzero(~np.isfinite(values))
    for i in bad.tolist():
        out[i] = None
    return out


def _finite_or_none(x: float | None) -> float | None:
    return x if x is None or math.isfinite(x) else None


def _flag_dict(f) -> dict[str, Any]:
    return {
        "code": f.code,
        "severity": f.severity,
        "value": _finite_or_none(f.value),
        "limit": _finite_or_none(f.limit),
        "message": f.message,
    }


# --- the summary document --------------------------------------------------------


def summary_document(summary: WeeklySummary) -> dict[str, Any]:
    """The summary part of the JSON export (everything but the per-shot rows)."""
    prev = summary.previous
    document = _clean(
        {
            "campaign": {"slug": summary.campaign_slug, "name": summary.campaign_name, "timezone": summary.timezone},
            "week": summary.week.label,
            "start_local": summary.start_local,
            "end_local": summary.end_local,
            "start_utc": summary.start_utc,
            "end_utc": summary.end_utc,
            "generated_at": summary.generated_at,
            "model_versions": summary.model_versions,
            "empty": summary.is_empty,
            "shot_count": summary.shot_count,
            "status_counts": summary.status_counts,
            "flag_counts": summary.flag_counts,
            "ranges": [asdict(r) for r in summary.ranges],
            "phase_stability": asdict(summary.phase_stability),
            "density_calibration": asdict(summary.density_calibration),
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
    # Built directly: thousands of entries, already plain values.
    document["flagged_shots"] = [
        {
            "shot_id": s.shot_id,
            "taken_at": _iso(s.taken_at),
            "status": s.status,
            "reasons": [_flag_dict(f) for f in s.reasons],
        }
        for s in summary.flagged_shots
    ]
    return document


# --- the per-shot table (CSV and Parquet share it) ------------------------------


def column_header(key: str) -> str:
    """``plasma.density_cm3 [cm^-3]``; text columns carry no unit."""
    if is_text_input(key):
        return key
    unit = unit_of(key)
    return f"{key} [{unit}]" if unit else key


def _flag_text(flags) -> str:
    return "; ".join(f"{f.code}:{f.severity}" for f in flags)


def _text_cell(v: Any) -> str:
    return "" if v is None else str(v)


def _csv_columns(shots: WeekShots, tz: ZoneInfo) -> Iterator[tuple[str, list[Any]]]:
    """Header and cells of each CSV column. Floats stay floats (the csv writer prints
    their shortest round-trip text) and nulls are None (an empty cell)."""
    yield "shot_id", list(shots.shot_id)
    yield "taken_at [UTC]", [_iso(t) for t in shots.taken_at]
    yield "taken_at_local", [_iso(t.astimezone(tz)) for t in shots.taken_at]
    yield "revision", [str(r) for r in shots.revision]
    yield "tags", [";".join(t) for t in shots.tags]
    yield "notes", list(shots.notes)
    for path in INPUT_PATHS:
        values = shots.inputs[path]
        if is_text_input(path):
            yield column_header(path), [_text_cell(v) for v in values.tolist()]
        else:
            yield column_header(path), _float_list(values)
    yield "status", [str(s) for s in shots.status.tolist()]
    yield "flags", [_flag_text(f) for f in shots.flags]
    yield "model_version", [_text_cell(v) for v in shots.model_version]
    yield "settings_version", [_text_cell(v) for v in shots.settings_version]
    for name in OUTPUT_NAMES:
        yield column_header(name), _float_list(shots.outputs[name])


def write_csv(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    shots = summary.shots
    text = io.TextIOWrapper(out, encoding="utf-8", newline="", write_through=True)
    try:
        writer = csv.writer(text, lineterminator="\r\n")
        columns = list(_csv_columns(shots, ZoneInfo(summary.timezone)))
        writer.writerow([name for name, _ in columns])
        rows = list(zip(*(cells for _, cells in columns)))
        total = len(rows)
        for start in range(0, total, _CHUNK):
            writer.writerows(rows[start : start + _CHUNK])
            if progress:
                progress(min(start + _CHUNK, total), total)
        text.flush()
    finally:
        text.detach()


def _shot_records(shots: WeekShots, progress: Progress | None = None) -> list[dict[str, Any]]:
    n = len(shots)
    columns: dict[str, list[tuple[str, list[Any]]]] = {}
    for path in INPUT_PATHS:
        group, name = path.split(".", 1)
        values = shots.inputs[path]
        cells = values.tolist() if is_text_input(path) else _float_list(values)
        columns.setdefault(group, []).append((name, cells))
    outputs = [(name, _float_list(shots.outputs[name])) for name in OUTPUT_NAMES]
    # Per group: its field names and one tuple of values per shot (dict(zip()) is the
    # fastest way to build 10,000 small dicts).
    groups = [(group, [name for name, _ in fields], list(zip(*(cells for _, cells in fields))) or [()] * n)
              for group, fields in columns.items()]
    output_names = [name for name, _ in outputs]
    output_rows = list(zip(*(cells for _, cells in outputs))) or [()] * n
    status = shots.status.tolist()
    records = []
    for i in range(n):
        record: dict[str, Any] = {
            "shot_id": shots.shot_id[i],
            "taken_at": _iso(shots.taken_at[i]),
            "revision": shots.revision[i],
            "notes": shots.notes[i],
            "tags": shots.tags[i],
        }
        for group, names, rows in groups:
            record[group] = dict(zip(names, rows[i]))
        # The evaluation as the shot API shows it: output names, status, flags, versions.
        if status[i] == NOT_EVALUATED:
            record["evaluation"] = None
        else:
            evaluation = dict(zip(output_names, output_rows[i]))
            evaluation["status"] = status[i]
            evaluation["flags"] = [_flag_dict(f) for f in shots.flags[i]]
            evaluation["model_version"] = shots.model_version[i]
            evaluation["settings_version"] = shots.settings_version[i]
            record["evaluation"] = evaluation
        records.append(record)
        if progress and (i + 1) % _CHUNK == 0:
            progress(i + 1, n)
    return records


def units_document() -> dict[str, str]:
    return {key: unit_of(key) for key in (*INPUT_PATHS, *OUTPUT_NAMES) if not is_text_input(key)}


def write_json(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    records = _shot_records(summary.shots, progress)
    total = len(records)
    document = {
        "kind": DOCUMENT_KIND,
        "version": DOCUMENT_VERSION,
        "summary": summary_document(summary),
        "units": units_document(),
        "shots": records,
    }
    # check_circular off: the document is a fresh tree of plain values (saves ~15 %).
    text = json.dumps(document, ensure_ascii=False, allow_nan=False, check_circular=False, separators=(",", ":"))
    out.write(text.encode("utf-8"))
    if progress:
        progress(total, total)


def write_parquet(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    shots = summary.shots
    fields: list[pa.Field] = []
    arrays: list[pa.Array] = []

    def add(name: str, array: pa.Array, unit: str | None = None) -> None:
        meta = {"unit": unit} if unit else None
        fields.append(pa.field(name, array.type, metadata=meta))
        arrays.append(array)

    add("shot_id", pa.array(shots.shot_id, type=pa.string()))
    add("taken_at", pa.array(shots.taken_at, type=pa.timestamp("us", tz="UTC")))
    add("revision", pa.array(shots.revision, type=pa.int32()))
    add("tags", pa.array(shots.tags, type=pa.list_(pa.string())))
    add("notes", pa.array(shots.notes, type=pa.string()))
    for path in INPUT_PATHS:
        values = shots.inputs[path]
        if is_text_input(path):
            add(path, pa.array(values.tolist(), type=pa.string()))
        else:
            add(path, pa.array(values, type=pa.float64(), from_pandas=True), unit_of(path))
    add("status", pa.array(shots.status.tolist(), type=pa.string()))
    flag_type = pa.list_(
        pa.struct(
            [
                ("code", pa.string()),
                ("severity", pa.string()),
                ("value", pa.float64()),
                ("limit", pa.float64()),
                ("message", pa.string()),
            ]
        )
    )
    add("flags", pa.array([[_flag_dict(f) for f in per] for per in shots.flags], type=flag_type))
    add("model_version", pa.array(shots.model_version, type=pa.string()))
    add("settings_version", pa.array(shots.settings_version, type=pa.int32()))
    for name in OUTPUT_NAMES:
        add(name, pa.array(shots.outputs[name], type=pa.float64(), from_pandas=True), unit_of(name))
    if progress:
        progress(len(shots) // 2, len(shots))
    schema = pa.schema(
        fields,
        metadata={
            "wakeledger.kind": DOCUMENT_KIND,
            "wakeledger.summary": json.dumps(summary_document(summary), allow_nan=False),
        },
    )
    pq.write_table(pa.Table.from_arrays(arrays, schema=schema), out, compression="zstd")
    if progress:
        progress(len(shots), len(shots))


# --- HTML report ---------------------------------------------------------------

_templates = add_caution_global(Environment(
    loader=PackageLoader("app", "templates"),
    autoescape=select_autoescape(["html"]),
    trim_blocks=True,
    lstrip_blocks=True,
))
_templates.globals["status_styles"] = STATUS_STYLES
_templates.globals["phase_window_shots"] = NEIGHBOUR_WINDOW_SHOTS
# Flagged shots listed in the HTML report per status; the CSV/JSON exports list all.
HTML_FLAGGED_LIMIT = 500


def format_number(value: float | None, unit: str = "") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    a = abs(value)
    text = f"{value:.3g}" if (a >= 1e5 or (a < 1e-2 and a != 0)) else f"{value:.4g}"
    return f"{text} {unit}".strip() if unit else text


def format_delta(value: float | int | None, unit: str = "") -> str:
    if value is None:
        return "–"
    if value == 0:
        return "±0"
    sign = "+" if value > 0 else "−"
    return sign + format_number(abs(value), unit) if isinstance(value, float) else f"{sign}{abs(value)}"


_templates.filters["num"] = format_number
_templates.filters["delta"] = format_delta
_templates.filters["unit"] = unit_of


def _charts(summary: WeeklySummary) -> dict[str, Any]:
    shots = summary.shots
    tz = ZoneInfo(summary.timezone)
    start = summary.start_local
    days = [(start + timedelta(days=d)) for d in range(7)]
    day_labels = [d.strftime("%a %d %b") for d in days]
    local_day = np.array([(t.astimezone(tz).date() - start.date()).days for t in shots.taken_at], dtype=int)
    hours = np.array(
        [(t - summary.start_utc).total_seconds() / 3600.0 for t in shots.taken_at], dtype=float
    )
    week_hours = (summary.end_utc - summary.start_utc).total_seconds() / 3600.0
    day_ticks = [
        ((datetime.combine(d.date(), datetime.min.time(), tzinfo=tz) - start).total_seconds() / 3600.0, label)
        for d, label in zip(days, day_labels)
    ]
    groups = [*STATUSES, NOT_EVALUATED]
    per_day = {
        g: [int(np.count_nonzero((local_day == d) & (shots.status == g))) for d in range(7)] for g in groups
    }
    per_day = {g: v for g, v in per_day.items() if g in STATUSES or any(v)}
    density = shots.inputs["plasma.density_cm3"]
    finite_density = density[np.isfinite(density)]
    density_offset_pct = (
        100.0 * (density / np.mean(finite_density) - 1.0) if finite_density.size else density
    )
    return {
        "per_day": charts.stacked_bars_svg(
            day_labels, per_day, title="Shots per day by status", x_label=f"day ({summary.timezone})", y_label="shots"
        ),
        "growth": charts.scatter_svg(
            hours,
            shots.outputs["growth_margin_efolds"],
            shots.status,
            title="Growth margin over the week",
            x_label=f"time ({summary.timezone})",
            y_label="growth margin [e-folds]",
            x_range=(0.0, week_hours),
            x_ticks=day_ticks,
        ),
        "phase": charts.scatter_svg(
            density_offset_pct,
            shots.inputs["measured.modulation_phase_rad"],
            shots.status,
            title="Measured phase against density offset",
            x_label="density offset from the week's mean [%]",
            y_label="measured phase [rad]",
        ),
        "mismatch": charts.histogram_svg(
            shots.outputs["frequency_mismatch_pct"],
            title="Frequency mismatch (measured against expected)",
            x_label="frequency mismatch [%]",
        ),
    }


def render_html(summary: WeeklySummary) -> str:
    flagged = {
        status: [s for s in summary.flagged_shots if s.status == status] for status in ("outside", "marginal")
    }
    tz = ZoneInfo(summary.timezone)
    return _templates.get_template("summary_report.html").render(
        s=summary,
        charts=_charts(summary),
        flagged=flagged,
        flagged_limit=HTML_FLAGGED_LIMIT,
        local=lambda t: t.astimezone(tz).strftime("%a %Y-%m-%d %H:%M:%S"),
        file_stem=export_file_name(summary.campaign_slug, summary.week.label, "").rstrip("."),
    )


def write_html(summary: WeeklySummary, out: BinaryIO, progress: Progress | None = None) -> None:
    html = render_html(summary)
    if progress:
        progress(summary.shot_count, summary.shot_count)
    out.write(html.encode("utf-8"))


WRITERS: dict[str, Callable[[WeeklySummary, BinaryIO, Progress | None], None]] = {
    "csv": write_csv,
    "json": write_json,
    "html": write_html,
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


def write_export_file(
    summary: WeeklySummary, fmt: str, path: Path, progress: Progress | None = None
) -> Path:
    """Write the export to ``path`` atomically (never half-written)."""
    return write_atomically(path, lambda out: write_export(summary, fmt, out, progress))
