"""Reads for the model against measurement, lean: a campaign's shots in a time window, time
ordered, straight into numpy columns (Core statements, no ORM objects, no Row objects, no JSON
decoded per shot; times in UTC as seconds since 1970).

``read_shots`` takes only the columns every shot needs (the measured diagnostics, the few inputs
the checks and the phase jitter read, the stored outputs they compare with, whether the stored
evaluation is current, and the run tags as one JSON array per shot, extracted in SQL).
``read_inputs`` takes every model input of the few shots that need more (the model run again, the
driver ranking's sample, the phase derivatives' sample), by primary key.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy import (
    JSON,
    ColumnElement,
    CursorResult,
    Float,
    Text,
    and_,
    case,
    cast,
    column,
    func,
    literal,
    select,
    true,
    type_coerce,
)
from sqlalchemy.orm import Session

import model
from app.store.exclusions import counted
from app.tables import Evaluation, Shot

#: The stored outputs the checks read (MODEL.md section 8 names).
CALIBRATION_OUTPUTS: tuple[str, ...] = (
    "plasma_frequency_ghz",
    "wakefield_estimate_mv_m",
    "saturation_length_m",
    "efolds_exit",
    "frequency_mismatch_pct",
)
#: Rows converted to columns at a time (the tuples of one chunk are all that is alive at once).
CHUNK_ROWS = 20_000
#: Primary keys per IN list of read_inputs (below SQLite's bound-parameter limit).
KEYS_PER_QUERY = 10_000


@dataclass
class ShotColumns:
    """Aligned per-shot columns in time order (NaN where a value is absent)."""

    pk: np.ndarray  # int64
    shot_id: list[str]
    taken_at: np.ndarray  # seconds since 1970, UTC
    current: np.ndarray  # bool: evaluated by this model version at this settings version
    run_tags: list[str | None]  # JSON array of the values at the run-tag paths (null where absent)
    values: dict[str, np.ndarray]  # input path or output name -> float64
    # Every model input of every shot (as read_inputs gives them) when the caller had read them all
    # already (the weekly summary's table): no shot is read again.
    every_input: dict[str, np.ndarray] | None = None

    def inputs_at(self, session: Session, at: np.ndarray) -> dict[str, np.ndarray]:
        """Every model input of the shots at the indices ``at`` (read_inputs, unless held already)."""
        if self.every_input is not None:
            return {path: column[at] for path, column in self.every_input.items()}
        return read_inputs(session, self.pk[at])


def _window(campaign_id: int, start_utc: datetime | None, end_utc: datetime | None) -> list[ColumnElement[bool]]:
    conditions = [Shot.campaign_id == campaign_id, *counted(Shot.id, campaign_id)]  # excluded shots count nowhere
    if start_utc is not None:
        conditions.append(Shot.taken_at >= start_utc)
    if end_utc is not None:
        conditions.append(Shot.taken_at < end_utc)
    return conditions


def count_calibration_rows(
    session: Session, campaign_id: int, start_utc: datetime | None, end_utc: datetime | None
) -> int:
    """Evaluated shots of the campaign taken in [start_utc, end_utc)."""
    stmt = (
        select(func.count())
        .select_from(Shot)
        .join(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(*_window(campaign_id, start_utc, end_utc))
    )
    return int(session.connection().execute(stmt).scalar_one())


def _seconds(dialect: str) -> ColumnElement[Any]:
    """taken_at as the driver gives it cheaply: SQLite's stored UTC text (numpy parses a whole column
    at once), PostgreSQL's epoch as float8 (exact to the microsecond, as the text is)."""
    if dialect == "postgresql":
        return cast(func.extract("epoch", Shot.taken_at), Float)
    return type_coerce(Shot.taken_at, Text)


def _run_tags(dialect: str, paths: Sequence[str]) -> tuple[ColumnElement[Any], list[Any]]:
    """One JSON array per shot of the raw payload's values at the dotted ``paths`` (one or two levels;
    null where absent), built in SQL so that only the few distinct arrays are ever decoded, and the
    lateral joins it needs. PostgreSQL parses a ``json`` value again for every ``#>``, so there the
    payload is parsed once by ``json_to_record`` (and each section, when it is an object, once more)."""
    if dialect != "postgresql":
        return type_coerce(func.json_extract(Shot.raw_payload, *(literal("$." + p, Text) for p in paths)), Text), []
    tops = list(dict.fromkeys(p.split(".")[0] for p in paths))
    top = (
        func.json_to_record(Shot.raw_payload)
        .table_valued(*(column(key, JSON) for key in tops))
        .render_derived("run_tag", with_types=True)
        .lateral()
    )
    joins: list[Any] = [top]
    sections: dict[str, Any] = {}
    for section in dict.fromkeys(p.split(".")[0] for p in paths if "." in p):
        keys = [p.split(".", 1)[1] for p in paths if p.startswith(section + ".")]
        value = top.c[section]
        sections[section] = (
            func.json_to_record(case((func.json_typeof(value) == "object", value)))
            .table_valued(*(column(key, JSON) for key in keys))
            .render_derived(f"run_tag_{section}", with_types=True)
            .lateral()
        )
        joins.append(sections[section])
    values = [sections[p.split(".")[0]].c[p.split(".", 1)[1]] if "." in p else top.c[p] for p in paths]
    return cast(func.json_build_array(*values), Text), joins


def _current(settings_version: int, model_version: str) -> ColumnElement[Any]:
    fresh = and_(Evaluation.settings_version == settings_version, Evaluation.model_version == model_version)
    return case((fresh, 1), else_=0)


def _float_columns(rows: np.ndarray) -> np.ndarray:
    return rows.astype(float)  # None reads as NaN


def _chunks(result: CursorResult[Any], on_rows: Callable[[int], None] | None) -> list[np.ndarray]:
    """The result as 2-D object arrays of CHUNK_ROWS rows (the driver's tuples, no Row objects)."""
    cursor = result.cursor  # the DBAPI cursor: every column read here needs no result processing
    parts: list[np.ndarray] = []
    done = 0
    while chunk := cursor.fetchmany(CHUNK_ROWS):
        block = np.empty((len(chunk), len(chunk[0])), dtype=object)
        block[:] = chunk
        parts.append(block)
        done += len(chunk)
        if on_rows is not None:
            on_rows(done)
    result.close()
    return parts


def read_shots(
    session: Session,
    campaign_id: int,
    start_utc: datetime | None,
    end_utc: datetime | None,
    *,
    inputs: Sequence[str],
    settings_version: int,
    model_version: str,
    run_tag_paths: Sequence[str],
    on_rows: Callable[[int], None] | None = None,
) -> ShotColumns:
    """The campaign's evaluated shots taken in [start_utc, end_utc) (open ends: all), by taken_at: the
    input paths ``inputs`` and CALIBRATION_OUTPUTS for every shot; ``on_rows(done)`` after each chunk."""
    conn = session.connection()
    dialect = conn.dialect.name
    numbers = [*(Shot.__table__.c[model.column_name(p)] for p in inputs)]
    numbers += [Evaluation.__table__.c[name] for name in CALIBRATION_OUTPUTS]
    run_tags, joins = _run_tags(dialect, run_tag_paths)
    stmt = select(
        Shot.id, Shot.shot_id, _seconds(dialect), _current(settings_version, model_version), run_tags, *numbers
    ).join(Evaluation, Evaluation.shot_pk == Shot.id)
    for lateral in joins:
        stmt = stmt.outerjoin(lateral, true())
    stmt = stmt.where(*_window(campaign_id, start_utc, end_utc)).order_by(Shot.taken_at, Shot.id)
    parts = _chunks(conn.execute(stmt), on_rows)
    rows = np.concatenate(parts) if parts else np.empty((0, 5 + len(numbers)), dtype=object)
    block = _float_columns(rows[:, 5:])
    names = [*inputs, *CALIBRATION_OUTPUTS]
    return ShotColumns(
        pk=rows[:, 0].astype(np.int64),
        shot_id=rows[:, 1].tolist(),
        taken_at=_as_seconds(rows[:, 2]),
        current=rows[:, 3].astype(bool),
        run_tags=rows[:, 4].tolist(),
        values={name: np.ascontiguousarray(block[:, j]) for j, name in enumerate(names)},
    )


def _as_seconds(values: np.ndarray) -> np.ndarray:
    """A taken_at column of _seconds as float seconds since 1970."""
    if not values.size or not isinstance(values[0], str):
        return values.astype(float)
    return values.astype("datetime64[us]").astype(np.int64) / 1e6


def read_inputs(session: Session, pks: np.ndarray) -> dict[str, np.ndarray]:
    """Every model input (dotted path -> float64, or object for the enums) of the shots with these
    primary keys, in the order given."""
    conn = session.connection()
    fields = model.INPUT_FIELDS
    columns = [Shot.__table__.c[model.column_name(f.path)] for f in fields]
    parts: list[np.ndarray] = []
    keys = np.asarray(pks, dtype=np.int64)
    for lo in range(0, keys.size, KEYS_PER_QUERY):
        part = keys[lo : lo + KEYS_PER_QUERY].tolist()
        parts += _chunks(conn.execute(select(Shot.id, *columns).where(Shot.id.in_(part))), None)
    rows = np.concatenate(parts) if parts else np.empty((0, 1 + len(columns)), dtype=object)
    found = rows[:, 0].astype(np.int64)
    order = np.argsort(found)
    at = order[np.searchsorted(found, keys, sorter=order)] if found.size else np.zeros(0, dtype=int)
    rows = rows[at]
    out: dict[str, np.ndarray] = {}
    for j, f in enumerate(fields, start=1):
        out[f.path] = rows[:, j].copy() if f.kind == "enum" else _float_columns(rows[:, j])
    return out
