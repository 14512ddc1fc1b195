"""Excluded shots: the one filter behind every count, chart, summary and listing.

A shot marked excluded (a test shot, a shot posted in the wrong units) is kept and shown,
but counts nowhere: status and flag counts, the overview's feeds and figures, the weekly
summary in every format, the shot table and its CSV, and the shot list of the API all
leave it out through ``counted`` -- unless a listing asks for it (``excluded=include``
or ``excluded=only``). Excluded shots are few, so the filter is "not among the excluded
shot keys" (a partial index finds those), which any query can apply to whichever shot key
column it reads (shots, evaluations or flags) without another join.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from sqlalchemy import ColumnElement, Select, exists, or_, select, update
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.orm import QueryableAttribute, Session
from sqlalchemy.sql.compiler import SQLCompiler
from sqlalchemy.sql.visitors import InternalTraversal

from app.tables import Shot

# How a listing treats excluded shots: left out (the default everywhere), listed with the
# others, or listed alone.
ExcludedMode = Literal["omit", "include", "only"]
EXCLUDED_MODES: tuple[str, ...] = ("omit", "include", "only")


class _OffSqliteIndexes(ColumnElement[Any]):
    """A column as SQLite's planner may not seek it in an index ("column + 0"); the column itself
    on PostgreSQL."""

    inherit_cache = True
    _traverse_internals = [("column", InternalTraversal.dp_clauseelement)]

    def __init__(self, column: Any) -> None:
        self.column = column
        self.type = column.type


@compiles(_OffSqliteIndexes)
def _the_column(element: _OffSqliteIndexes, compiler: SQLCompiler, **kw: Any) -> str:
    return compiler.process(element.column, **kw)


@compiles(_OffSqliteIndexes, "sqlite")
def _the_column_plus_zero(element: _OffSqliteIndexes, compiler: SQLCompiler, **kw: Any) -> str:
    return compiler.process(element.column + 0, **kw)


def excluded_shot_pks(campaign_id: int | None = None) -> Select[Any]:
    """Keys of the excluded shots (of one campaign, or of all)."""
    stmt = select(Shot.id).where(Shot.excluded_at.is_not(None))
    # The planner should read the partial index of the excluded shots (a few entries), not the
    # (campaign_id, id) index, which has an entry for every shot of the campaign. SQLite prefers
    # the latter unless the campaign term is kept off every index ("+ 0": at 100,000 shots that
    # cost 30-40 ms in each of the overview's queries); PostgreSQL needs the plain term to use
    # the partial index when its statistics are not gathered yet: with "+ 0" it scanned the
    # whole shots table (10 ms in each query of a weekly export at 20,000 shots).
    return stmt if campaign_id is None else stmt.where(_OffSqliteIndexes(Shot.campaign_id) == campaign_id)


def counted(
    shot_pk: ColumnElement[Any] | QueryableAttribute[Any], campaign_id: int | None = None, excluded: str = "omit"
) -> list[ColumnElement[bool]]:
    """The conditions (for ``.where(*...)``) that keep excluded shots out (``omit``), let
    them in (``include``: none) or keep only them (``only``); ``shot_pk`` is the shot key
    column of the query (``Shot.id``, ``Evaluation.shot_pk``, ``Flag.shot_pk``)."""
    if excluded == "include":
        return []
    keys = excluded_shot_pks(campaign_id)
    if excluded == "only":
        return [shot_pk.in_(keys)]
    # "None is excluded" is evaluated once per statement and spares the per-row lookup in
    # the usual case (measured at 100,000 shots: status counts 34 -> 27 ms CPU, the table's
    # first page 109 -> 85 ms; with 20 excluded shots both forms cost the same).
    return [or_(~exists(keys), shot_pk.not_in(keys))]


def set_exclusion(session: Session, shot_pk: int, at: datetime | None, reason: str | None, by: str | None) -> None:
    """Mark a shot excluded (``at`` set) or counted again (all None); its revision is untouched."""
    session.execute(
        update(Shot).where(Shot.id == shot_pk).values(excluded_at=at, excluded_reason=reason, excluded_by=by)
    )
