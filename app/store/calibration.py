"""Reads for the model against measurement: a campaign's shots in a time window, time
ordered, column-wise, with the inputs the model needs and the outputs the checks compare
with (Core statements, no ORM objects; times in UTC)."""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy import ColumnElement, Text, func, select, type_coerce
from sqlalchemy.orm import Session

from app.store.exclusions import counted
from app.store.exports import SHOT_INPUT_COLUMNS
from app.tables import Evaluation, Shot

#: The stored outputs the checks read (MODEL.md section 8 names).
CALIBRATION_OUTPUTS: tuple[str, ...] = (
    "plasma_frequency_ghz",
    "wakefield_estimate_mv_m",
    "saturation_length_m",
    "efolds_exit",
    "phase_per_pct_density_rad",
    "frequency_mismatch_pct",
)

#: The keys of a row of iter_calibration_rows, in order.
CALIBRATION_KEYS: tuple[str, ...] = ("shot_id", "taken_at", *SHOT_INPUT_COLUMNS, *CALIBRATION_OUTPUTS)


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


def iter_calibration_rows(
    session: Session, campaign_id: int, start_utc: datetime | None, end_utc: datetime | None, chunk: int = 20000
) -> Iterator[list[Any]]:
    """The campaign's evaluated shots taken in [start_utc, end_utc) (open ends: all), by taken_at,
    ``chunk`` rows at a time, each row in the order of CALIBRATION_KEYS."""
    columns = [
        Shot.shot_id,
        # As stored (text on SQLite): taken_at_seconds reads a whole column at once.
        type_coerce(Shot.taken_at, Text).label("taken_at"),
        *(Shot.__table__.c[name] for name in SHOT_INPUT_COLUMNS),
        *(Evaluation.__table__.c[name] for name in CALIBRATION_OUTPUTS),
    ]
    stmt = (
        select(*columns)
        .join(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(*_window(campaign_id, start_utc, end_utc))
        .order_by(Shot.taken_at, Shot.id)
    )
    result = session.connection().execute(stmt)
    while part := result.fetchmany(chunk):
        yield list(part)


def taken_at_seconds(values: Sequence[Any]) -> np.ndarray:
    """The taken_at column of iter_calibration_rows as seconds since 1970 (UTC): SQLite's stored
    UTC text parsed by numpy in one go, a driver's aware datetimes converted one by one."""
    if not values:
        return np.zeros(0)
    if isinstance(values[0], str):
        return np.array(values, dtype="datetime64[us]").astype(np.int64) / 1e6
    return np.array([v.astimezone(UTC).timestamp() for v in values], dtype=float)
