"""Reads for the model against measurement: a campaign's shots in a time window, time
ordered, column-wise, with the inputs the model needs and the outputs the checks compare
with (Core statements, no ORM objects; times in UTC)."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import datetime
from typing import Any

from sqlalchemy import ColumnElement, func, select
from sqlalchemy.orm import Session

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
    conditions = [Shot.campaign_id == campaign_id]
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
        Shot.taken_at,
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
