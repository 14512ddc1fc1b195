"""Reads of whole shot rows for exports and summaries: shots with their current
evaluation column-wise (Core statements, no ORM objects for 10,000 rows), their flags
column-wise, and flag counts. A week is read a few thousand rows at a time, each chunk
turned into arrays before the next is read, so its Python objects never all live at once.

Times in and out are UTC (the tables' UTCDateTime type sees to that on every backend).
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, NamedTuple

import numpy as np
import orjson
from sqlalchemy import ColumnElement, Select, Text, cast, distinct, func, select
from sqlalchemy.orm import Session

import model
from app.database import BINARY_ROWS
from app.store.exclusions import counted
from app.tables import Evaluation, Flag, Shot

#: Shot input columns (``model.column_name`` of each input path), in the model's order.
SHOT_INPUT_COLUMNS: tuple[str, ...] = tuple(model.column_name(f.path) for f in model.INPUT_FIELDS)
#: Evaluation output columns (MODEL.md section 8 names), in the model's order.
EVALUATION_OUTPUT_COLUMNS: tuple[str, ...] = model.OUTPUT_NAMES


def shared(texts: Sequence[Any]) -> list[Any]:
    """The values with one object per distinct value: the driver makes a new string per row, and a
    week's flag codes, severities and statuses are a handful of values in tens of thousands of rows."""
    seen: dict[Any, Any] = {}
    return [seen.setdefault(t, t) for t in texts]


class FlagRow(NamedTuple):
    """One flag (a tuple: the weekly summary holds tens of thousands)."""

    shot_pk: int
    code: str
    severity: str
    value: float | None
    limit: float | None
    message: str


def in_window(
    campaign_id: int, start_utc: datetime, end_utc: datetime, excluded: str = "omit"
) -> list[ColumnElement[bool]]:
    """Counted shots of the campaign taken in [start_utc, end_utc) (``excluded``: see
    ``app.store.exclusions.counted``)."""
    return [
        Shot.campaign_id == campaign_id,
        Shot.taken_at >= start_utc,
        Shot.taken_at < end_utc,
        *counted(Shot.id, campaign_id, excluded),
    ]


def count_shots(session: Session, conditions: Sequence[ColumnElement[bool]]) -> int:
    """How many shots match ``conditions``."""
    return session.connection().scalar(select(func.count()).select_from(Shot).where(*conditions)) or 0


def shot_rows_query(
    conditions: Sequence[ColumnElement[bool]],
    order_by: Sequence[Any] = (Shot.taken_at, Shot.id),
    input_columns: Sequence[str] = SHOT_INPUT_COLUMNS,
    output_columns: Sequence[str] = EVALUATION_OUTPUT_COLUMNS,
    *,
    details: bool = True,
    payloads: bool = False,
    exclusion: bool = False,
) -> Select[Any]:
    """Shots matching ``conditions`` with their evaluation (None where there is none).
    Keys: shot_pk, status; with ``details`` also shot_id, taken_at, revision, notes, tags,
    model_version, settings_version; with ``payloads`` the raw payload as JSON text; with
    ``exclusion`` excluded_at and excluded_reason (None for a counted shot);
    then the requested input and output columns under their column names."""
    meta: list[Any] = [Shot.id.label("shot_pk"), Evaluation.status]
    if details:
        meta += [
            Shot.shot_id,
            Shot.taken_at,
            Shot.revision,
            Shot.notes,
            # Raw JSON text, cast in SQL (psycopg would decode a PostgreSQL json column itself,
            # with the standard parser): most shots have no tags, and decoding 10,000 "[]"
            # through the JSON type costs more than the rest of the row.
            cast(Shot.tags, Text).label("tags"),
            Evaluation.model_version,
            Evaluation.settings_version,
        ]
    if payloads:
        meta.append(cast(Shot.raw_payload, Text).label("raw_payload"))
    if exclusion:
        meta += [Shot.excluded_at, Shot.excluded_reason]
    shot_cols = [Shot.__table__.c[name] for name in input_columns]
    eval_cols = [Evaluation.__table__.c[name] for name in output_columns]
    return (
        select(*meta, *shot_cols, *eval_cols)
        .outerjoin(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(*conditions)
        .order_by(*order_by)
    )


def _columns(keys: Sequence[str], rows: Sequence[Any]) -> dict[str, list[Any]]:
    """Rows column-wise; tags and payloads decoded."""
    values: list[Any] = list(zip(*rows, strict=True)) if rows else [()] * len(keys)
    columns = {key: list(column) for key, column in zip(keys, values, strict=True)}
    if "tags" in columns:
        columns["tags"] = [_json_list(t) for t in columns["tags"]]
    if "raw_payload" in columns:
        columns["raw_payload"] = [_json_object(p) for p in columns["raw_payload"]]
    return columns


def fetch_shot_rows(session: Session, stmt: Select[Any]) -> dict[str, list[Any]]:
    """All rows of ``shot_rows_query`` (or of any select) column-wise."""
    result = session.connection().execute(stmt)
    return _columns(list(result.keys()), result.all())


def iter_shot_rows(session: Session, stmt: Select[Any], chunk: int = 1000) -> Iterator[dict[str, list[Any]]]:
    """The rows of ``shot_rows_query`` (or of any select) column-wise, ``chunk`` rows at a time (a
    server-side cursor where the driver has one): memory stays flat; at least one (possibly empty) chunk.
    The options go on the statement: ``Connection.execution_options`` would change the session's
    connection in place and buffer every later result read on it. PostgreSQL sends the rows in
    binary (``app.database.BINARY_ROWS``): parsing 900,000 floats from text cost more than the query."""
    result = session.connection().execute(stmt.execution_options(yield_per=chunk, **{BINARY_ROWS: True}))
    keys = list(result.keys())
    empty = True
    for part in result.partitions():
        empty = False
        yield _columns(keys, part)
    if empty:
        yield _columns(keys, [])


def _json_list(raw: Any) -> list[str]:
    if isinstance(raw, list):  # a driver that decodes JSON itself
        return raw
    if not raw or raw == "[]":
        return []
    return list(orjson.loads(raw))


def _json_object(raw: Any) -> dict[str, Any]:
    """A shot's raw payload decoded (orjson), with the integers beyond 64 bits of the sections beside
    the model's exact: orjson reads those as floats, so such a shot is decoded again by the standard
    parser. (The model's own sections are read from their columns; they are not searched.)"""
    if isinstance(raw, dict):
        return raw
    if not raw:
        return {}
    try:
        payload = orjson.loads(raw)
    except orjson.JSONDecodeError:
        return json.loads(raw)
    if isinstance(payload, dict):
        for key, value in payload.items():
            if type(value) is not str and key not in _MODEL_SECTIONS and _may_be_rounded(value):
                return json.loads(raw)
    return payload


_MODEL_SECTIONS = frozenset(model.SECTIONS)
_BEYOND_64_BITS = 2.0**63  # orjson keeps integers in [-2**63, 2**64) exact


def _may_be_rounded(value: Any) -> bool:
    """Whether a decoded value holds a float as large as an integer beyond 64 bits read by orjson."""
    kind = type(value)
    if kind is float:
        return abs(value) >= _BEYOND_64_BITS
    if kind is dict:
        return any(map(_may_be_rounded, value.values()))
    if kind is list:
        return any(map(_may_be_rounded, value))
    return False


@dataclass(frozen=True)
class FlagColumns:
    """Flags column-wise, by shot then rule order: ``shot_pk`` (int64), ``value`` and ``limit``
    (float, NaN for none) as arrays, the texts as lists."""

    shot_pk: np.ndarray
    code: list[str]
    severity: list[str]
    value: np.ndarray
    limit: np.ndarray
    message: list[str]

    def __len__(self) -> int:
        return len(self.code)

    @classmethod
    def of_lists(cls, shot_pk: Sequence[int], code: Sequence[str], severity: Sequence[str], value: Sequence[Any],
                 limit: Sequence[Any], message: Sequence[str]) -> FlagColumns:  # fmt: skip
        return cls(
            np.array(shot_pk, dtype=np.int64).reshape(-1),
            shared(code),
            shared(severity),
            np.array(value, dtype=float).reshape(-1),  # None reads as NaN
            np.array(limit, dtype=float).reshape(-1),
            list(message),
        )

    def taken(self, order: np.ndarray) -> FlagColumns:
        """The flags at the positions ``order``, in that order."""
        picks = order.tolist()
        return FlagColumns(
            self.shot_pk[order],
            [self.code[j] for j in picks],
            [self.severity[j] for j in picks],
            self.value[order],
            self.limit[order],
            [self.message[j] for j in picks],
        )

    @classmethod
    def empty(cls) -> FlagColumns:
        return cls.of_lists([], [], [], [], [], [])

    @classmethod
    def concatenated(cls, parts: Sequence[FlagColumns]) -> FlagColumns:
        if len(parts) == 1:
            return parts[0]
        return cls(
            np.concatenate([np.zeros(0, dtype=np.int64), *(p.shot_pk for p in parts)]),
            [c for p in parts for c in p.code],
            [s for p in parts for s in p.severity],
            np.concatenate([np.zeros(0), *(p.value for p in parts)]),
            np.concatenate([np.zeros(0), *(p.limit for p in parts)]),
            [m for p in parts for m in p.message],
        )


def fetch_flags(session: Session, conditions: Sequence[ColumnElement[bool]]) -> FlagColumns:
    """Every flag of the current evaluations of the shots matching ``conditions``, by shot key then
    rule order (``ShotFlags.of_shots`` puts them in a table's row order)."""
    columns: list[Any] = [Flag.shot_pk, Flag.id, Flag.code, Flag.severity, Flag.value, Flag.limit.label("limit"),
                          Flag.message]  # fmt: skip
    # No ORDER BY: PostgreSQL's sort of a week's 40,000 joined flags (spilled to disk) cost as much
    # as reading them; numpy orders them by shot key, then flag key (the rules' order) instead.
    stmt = select(*columns).join(Shot, Shot.id == Flag.shot_pk).where(*conditions)
    parts, keys = [], []
    for c in iter_shot_rows(session, stmt, chunk=2000):
        parts.append(FlagColumns.of_lists(c["shot_pk"], c["code"], c["severity"], c["value"], c["limit"], c["message"]))
        keys.append(np.array(c["id"], dtype=np.int64).reshape(-1))
    flags = FlagColumns.concatenated(parts)
    order = np.lexsort((np.concatenate(keys), flags.shot_pk))
    return flags.taken(order) if np.any(np.diff(order) < 0) else flags


def fetch_flags_of(session: Session, shot_pks: Sequence[int]) -> FlagColumns:
    """Every flag of the given shots (chunked to stay under bind limits)."""
    pks = [int(pk) for pk in shot_pks]
    parts = [fetch_flags(session, [Shot.id.in_(pks[start : start + 900])]) for start in range(0, len(pks), 900)]
    return FlagColumns.concatenated(parts or [FlagColumns.empty()])


def count_flags(session: Session, conditions: Sequence[ColumnElement[bool]]) -> list[tuple[str, str, int]]:
    """(code, severity, number of shots) for the flags of the shots matching ``conditions``."""
    stmt = (
        select(Flag.code, Flag.severity, func.count(distinct(Flag.shot_pk)))
        .join(Shot, Shot.id == Flag.shot_pk)
        .where(*conditions)
        .group_by(Flag.code, Flag.severity)
    )
    return [(code, severity, int(n)) for code, severity, n in session.connection().execute(stmt)]


def iter_payloads(
    session: Session, conditions: Sequence[ColumnElement[bool]], chunk: int = 2000
) -> Iterator[dict[str, Any]]:
    """The raw payloads of the shots matching ``conditions`` (any order), one at a time."""
    stmt = (
        select(cast(Shot.raw_payload, Text))
        .select_from(Shot)
        .outerjoin(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(*conditions)
    )
    result = session.connection().execute(stmt.execution_options(yield_per=chunk))
    for part in result.partitions():
        for (raw,) in part:
            yield _json_object(raw)
