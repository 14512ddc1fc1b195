"""The week's queries for the weekly summary: one joined read of shots with their
evaluations, one read of their flags, and flag counts for the comparison week.

Times in and out are UTC (the tables' UTCDateTime type sees to that on every backend).
The reads run on the session's connection as Core statements: no ORM row objects are
built for a 10,000-shot week.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy import Text, distinct, func, select, type_coerce
from sqlalchemy.orm import Session

from app.tables import Evaluation, Flag, Shot

_INPUT_GROUPS = ("driver_", "plasma_", "seed_", "measured_")
_EVALUATION_META = {"shot_pk", "campaign_id", "model_version", "settings_version", "status", "evaluated_at"}

#: Shot input columns (dotted input path with '.' -> '_'), in table order.
SHOT_INPUT_COLUMNS: tuple[str, ...] = tuple(
    c.name for c in Shot.__table__.columns if c.name.startswith(_INPUT_GROUPS)
)
#: Evaluation output columns (MODEL.md section 8 names), in table order.
EVALUATION_OUTPUT_COLUMNS: tuple[str, ...] = tuple(
    c.name for c in Evaluation.__table__.columns if c.name not in _EVALUATION_META
)


@dataclass(frozen=True)
class FlagRow:
    shot_pk: int
    code: str
    severity: str
    value: float | None
    limit: float | None
    message: str


def _in_week(campaign_id: int, start_utc: datetime, end_utc: datetime) -> list[Any]:
    return [Shot.campaign_id == campaign_id, Shot.taken_at >= start_utc, Shot.taken_at < end_utc]


def fetch_week_rows(
    session: Session,
    campaign_id: int,
    start_utc: datetime,
    end_utc: datetime,
    input_columns: Sequence[str] = SHOT_INPUT_COLUMNS,
    output_columns: Sequence[str] = EVALUATION_OUTPUT_COLUMNS,
    *,
    details: bool = True,
) -> dict[str, list[Any]]:
    """Shots taken in [start_utc, end_utc) with their evaluation, column-wise, in
    taken_at order. Keys: shot_pk, status (None when not evaluated); with ``details``
    also shot_id, taken_at, revision, notes, tags, model_version, settings_version;
    then the requested input and output columns under their column names."""
    meta = [Shot.id.label("shot_pk"), Evaluation.status]
    if details:
        meta += [
            Shot.shot_id,
            Shot.taken_at,
            Shot.revision,
            Shot.notes,
            # Raw JSON text: most shots have no tags, and decoding 10,000 "[]" through the
            # JSON type costs more than the rest of the row.
            type_coerce(Shot.tags, Text).label("tags"),
            Evaluation.model_version,
            Evaluation.settings_version,
        ]
    shot_cols = [Shot.__table__.c[name] for name in input_columns]
    eval_cols = [Evaluation.__table__.c[name] for name in output_columns]
    stmt = (
        select(*meta, *shot_cols, *eval_cols)
        .outerjoin(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(*_in_week(campaign_id, start_utc, end_utc))
        .order_by(Shot.taken_at, Shot.id)
    )
    result = session.connection().execute(stmt)
    keys = list(result.keys())
    rows = result.all()
    columns: dict[str, list[Any]] = {k: [] for k in keys}
    for key, values in zip(keys, zip(*rows)):
        columns[key] = list(values)
    if details:
        columns["tags"] = [_tags(t) for t in columns["tags"]]
    return columns


def _tags(raw: Any) -> list[str]:
    if isinstance(raw, list):  # a driver that decodes JSON itself
        return raw
    if not raw or raw == "[]":
        return []
    return list(json.loads(raw))


def fetch_week_flags(
    session: Session, campaign_id: int, start_utc: datetime, end_utc: datetime
) -> list[FlagRow]:
    """Every flag of the current evaluations of the week's shots, by shot then rule order."""
    stmt = (
        select(Flag.shot_pk, Flag.code, Flag.severity, Flag.value, Flag.limit, Flag.message)
        .join(Shot, Shot.id == Flag.shot_pk)
        .where(*_in_week(campaign_id, start_utc, end_utc))
        .order_by(Flag.shot_pk, Flag.id)
    )
    return [FlagRow(*row) for row in session.connection().execute(stmt)]


def count_week_flags(
    session: Session, campaign_id: int, start_utc: datetime, end_utc: datetime
) -> list[tuple[str, str, int]]:
    """(code, severity, number of shots) for the week's flags."""
    stmt = (
        select(Flag.code, Flag.severity, func.count(distinct(Flag.shot_pk)))
        .join(Shot, Shot.id == Flag.shot_pk)
        .where(*_in_week(campaign_id, start_utc, end_utc))
        .group_by(Flag.code, Flag.severity)
    )
    return [(code, severity, int(n)) for code, severity, n in session.connection().execute(stmt)]
