"""Shots, their revisions, evaluations and flags.

New rows go in through ``bulk_insert`` (one driver call per table), so a 5,000-shot
batch is a handful of statements.
"""

from __future__ import annotations

import base64
import json
import sqlite3
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from itertools import chain
from typing import Any, cast

import orjson
from sqlalchemy import (
    ColumnElement,
    Float,
    Select,
    Table,
    and_,
    bindparam,
    delete,
    exists,
    func,
    or_,
    select,
    text,
    update,
)
from sqlalchemy.orm import Session

import model
from app.store.exclusions import counted
from app.tables import Evaluation, Flag, Shot, ShotRevision, UTCDateTime

SHOTS = cast(Table, Shot.__table__)
REVISIONS = cast(Table, ShotRevision.__table__)
EVALUATIONS = cast(Table, Evaluation.__table__)
FLAGS = cast(Table, Flag.__table__)


@dataclass(frozen=True)
class StoredDigest:
    shot_pk: int
    payload_sha256: str


def digests_by_shot_id(session: Session, campaign_id: int, shot_ids: Sequence[str]) -> dict[str, StoredDigest]:
    """Stored payload hashes for the given shot ids, in one statement whatever their number: the ids
    are one parameter (a JSON array read by json_each on SQLite, an array on PostgreSQL)."""
    ids = list(shot_ids)
    if not ids:
        return {}
    given: str | list[str]
    if session.connection().dialect.name == "sqlite":
        wanted, given = "IN (SELECT value FROM json_each(:ids))", orjson.dumps(ids).decode()
    else:
        wanted, given = "= ANY(:ids)", ids
    rows = session.execute(
        text(f"SELECT shot_id, id, payload_sha256 FROM shots WHERE campaign_id = :campaign AND shot_id {wanted}"),
        {"campaign": campaign_id, "ids": given},
    )
    return {shot_id: StoredDigest(pk, sha) for shot_id, pk, sha in rows}


def raw_payloads(session: Session, shot_pks: Iterable[int]) -> dict[int, dict[str, Any]]:
    pks = list(shot_pks)
    if not pks:
        return {}
    return dict(session.execute(select(Shot.id, Shot.raw_payload).where(Shot.id.in_(pks))).all())


Columns = Mapping[str, Sequence[Any]]  # column name -> values, all of one length


class SerialisedJson(list):
    """A JSON column's values already written as JSON text: bulk_insert stores them as they are."""


def _processed(process: Callable[[Any], Any], values: Sequence[Any]) -> list[Any]:
    """Apply a bind processor, once per run of the same object (constant columns are common)."""
    out: list[Any] = []
    last: Any = _processed
    done: Any = None
    for value in values:
        if value is not last:
            last, done = value, process(value)
        out.append(done)
    return out


# SQLite: rows per INSERT statement (multi-row VALUES). Each statement run costs the driver
# binding and stepping overhead once: 100 rows a statement take about a quarter less CPU than
# one-row statements (a 5,000-shot batch writes some 35,000 rows).
ROWS_PER_STATEMENT = 100


def bulk_insert(session: Session, table: Table, rows: Columns) -> None:
    """Insert rows given as columns in one driver call (two on SQLite, for the rows past the last full group).

    The values go through each column type's own bind processor, then straight to the
    driver (SQLite: executemany of ROWS_PER_STATEMENT-row statements; PostgreSQL: COPY),
    skipping SQLAlchemy's per-row parameter handling, the largest cost of a 5,000-shot batch.
    """
    if not rows or not len(next(iter(rows.values()))):
        return
    conn = session.connection()
    dialect = conn.dialect
    names = list(rows)
    columns: list[Sequence[Any]] = []
    for name in names:
        values = rows[name]
        if isinstance(values, SerialisedJson):
            columns.append(values)
            continue
        column_type = table.c[name].type
        if isinstance(column_type, Float):
            # Floats go to the driver as they are: the SQLite processor only turns Decimals (never given) into floats.
            columns.append(values)
            continue
        if isinstance(column_type, UTCDateTime) and dialect.name == "sqlite":
            columns.append(_processed(UTCDateTime.sqlite_text, values))  # the same text, written in C
            continue
        process = column_type.dialect_impl(dialect).bind_processor(dialect)
        columns.append(_processed(process, values) if process else values)
    quote = dialect.identifier_preparer.quote
    column_list = ", ".join(quote(n) for n in names)
    if dialect.name == "postgresql":
        # COPY is the bulk path of PostgreSQL; it runs inside the session's transaction.
        driver = conn.connection.driver_connection
        assert driver is not None
        with driver.cursor() as cursor:
            with cursor.copy(f"COPY {quote(table.name)} ({column_list}) FROM STDIN") as copy:
                for row in zip(*columns, strict=False):
                    copy.write_row(row)
        return
    insert = f"INSERT INTO {quote(table.name)} ({column_list}) VALUES "
    one_row = "(" + ", ".join("?" * len(names)) + ")"
    values = list(zip(*columns, strict=True))
    driver = conn.connection.driver_connection
    assert driver is not None
    per_statement = max(1, min(ROWS_PER_STATEMENT, driver.getlimit(sqlite3.SQLITE_LIMIT_VARIABLE_NUMBER) // len(names)))
    whole = len(values) // per_statement * per_statement
    if whole:
        groups = [tuple(chain.from_iterable(values[i : i + per_statement])) for i in range(0, whole, per_statement)]
        conn.exec_driver_sql(insert + ", ".join([one_row] * per_statement), groups)
    if whole < len(values):
        conn.exec_driver_sql(insert + one_row, values[whole:])


def insert_shots(session: Session, rows: Columns) -> list[int]:
    """Insert shot rows; returns their primary keys in the order given.

    The keys are taken first (SQLite: the caller holds the database write lock, see
    app.database.begin_write, so they follow the largest key; PostgreSQL: from the
    sequence), then the rows go in through bulk_insert.
    """
    n = len(next(iter(rows.values()), []))
    if n == 0:
        return []
    if session.connection().dialect.name == "sqlite":
        first = (session.scalar(select(func.max(SHOTS.c.id))) or 0) + 1
        pks = list(range(first, first + n))
    else:
        pks = list(
            session.scalars(
                text("SELECT nextval(pg_get_serial_sequence('shots', 'id')) FROM generate_series(1, :n)"), {"n": n}
            )
        )
    bulk_insert(session, SHOTS, {"id": pks, **rows})
    return pks


def insert_revisions(session: Session, rows: Columns) -> None:
    bulk_insert(session, REVISIONS, rows)


def insert_evaluations(session: Session, rows: Columns) -> None:
    bulk_insert(session, EVALUATIONS, rows)


def insert_flags(session: Session, rows: Columns) -> None:
    bulk_insert(session, FLAGS, rows)


def replace_evaluations(session: Session, rows: Sequence[dict[str, Any]], flag_rows: Sequence[dict[str, Any]]) -> None:
    """Overwrite the current evaluation of existing shots and swap their flags (rows as dicts)."""
    if not rows:
        return
    pks = [r["shot_pk"] for r in rows]
    for start in range(0, len(pks), 900):
        session.execute(delete(FLAGS).where(FLAGS.c.shot_pk.in_(pks[start : start + 900])))
    columns = [c for c in rows[0] if c != "shot_pk"]
    stmt = (
        update(EVALUATIONS)
        .where(EVALUATIONS.c.shot_pk == bindparam("b_shot_pk"))
        .values({c: bindparam(f"b_{c}") for c in columns})
    )
    session.execute(stmt, [{f"b_{k}": v for k, v in r.items()} for r in rows])
    if flag_rows:
        insert_flags(session, {name: [r[name] for r in flag_rows] for name in flag_rows[0]})


def update_shot(session: Session, shot_pk: int, values: dict[str, Any]) -> None:
    session.execute(update(SHOTS).where(SHOTS.c.id == shot_pk).values(**values))


def get_shot(session: Session, campaign_id: int, shot_id: str) -> Shot | None:
    return session.scalar(select(Shot).where(Shot.campaign_id == campaign_id, Shot.shot_id == shot_id))


def latest_shot(session: Session, campaign_id: int) -> Shot | None:
    """The campaign's counted shot taken last (the highest id among equal times), None for a campaign without one."""
    return session.scalar(
        select(Shot)
        .where(Shot.campaign_id == campaign_id, *counted(Shot.id, campaign_id))
        .order_by(Shot.taken_at.desc(), Shot.id.desc())
        .limit(1)
    )


def get_evaluation(session: Session, shot_pk: int) -> Evaluation | None:
    return session.get(Evaluation, shot_pk)


def flags_for(session: Session, shot_pks: Sequence[int]) -> dict[int, list[Flag]]:
    out: dict[int, list[Flag]] = {pk: [] for pk in shot_pks}
    if not shot_pks:
        return out
    for flag in session.scalars(select(Flag).where(Flag.shot_pk.in_(list(shot_pks))).order_by(Flag.id)):
        out[flag.shot_pk].append(flag)
    return out


def revisions_of(session: Session, shot_pk: int) -> list[ShotRevision]:
    return list(
        session.scalars(select(ShotRevision).where(ShotRevision.shot_pk == shot_pk).order_by(ShotRevision.revision))
    )


# --- listing with filters and an opaque cursor over (taken_at, id) -------------------------


@dataclass(frozen=True)
class ShotFilter:
    status: Sequence[str] = ()
    flag_code: Sequence[str] = ()
    taken_from: datetime | None = None
    taken_to: datetime | None = None
    seed_method: Sequence[str] = ()
    descending: bool = False
    excluded: str = "omit"  # app.store.exclusions.EXCLUDED_MODES


def encode_cursor(taken_at: datetime, pk: int, descending: bool) -> str:
    raw = json.dumps([taken_at.isoformat(), pk, "d" if descending else "a"], separators=(",", ":"))
    return base64.urlsafe_b64encode(raw.encode()).decode().rstrip("=")


def decode_cursor(cursor: str) -> tuple[datetime, int, bool]:
    """Raises ValueError for anything that is not a cursor we issued."""
    padded = cursor + "=" * (-len(cursor) % 4)
    taken_at, pk, order = json.loads(base64.urlsafe_b64decode(padded.encode()).decode())
    when = datetime.fromisoformat(taken_at)
    if when.tzinfo is None or not isinstance(pk, int) or order not in ("a", "d"):
        raise ValueError("malformed cursor")
    return when, pk, order == "d"


def _filtered(campaign_id: int, f: ShotFilter) -> Select[Any]:
    stmt: Any = (
        select(Shot, Evaluation)
        .join(Evaluation, Evaluation.shot_pk == Shot.id)
        .where(Shot.campaign_id == campaign_id, *counted(Shot.id, campaign_id, f.excluded))
    )
    if f.status:
        stmt = stmt.where(Evaluation.status.in_(list(f.status)))
    if f.flag_code:
        stmt = stmt.where(exists().where(Flag.shot_pk == Shot.id, Flag.code.in_(list(f.flag_code))))
    if f.taken_from is not None:
        stmt = stmt.where(Shot.taken_at >= f.taken_from)
    if f.taken_to is not None:
        stmt = stmt.where(Shot.taken_at < f.taken_to)
    if f.seed_method:
        stmt = stmt.where(Shot.seed_method.in_(list(f.seed_method)))
    return stmt


def list_shots(
    session: Session, campaign_id: int, f: ShotFilter, after: tuple[datetime, int] | None, limit: int
) -> tuple[list[tuple[Shot, Evaluation]], tuple[datetime, int] | None]:
    """One page in (taken_at, id) order and the key of its last row if more follow."""
    stmt = _filtered(campaign_id, f)
    if after is not None:
        at, pk = after
        if f.descending:
            stmt = stmt.where(or_(Shot.taken_at < at, and_(Shot.taken_at == at, Shot.id < pk)))
        else:
            stmt = stmt.where(or_(Shot.taken_at > at, and_(Shot.taken_at == at, Shot.id > pk)))
    order = (Shot.taken_at.desc(), Shot.id.desc()) if f.descending else (Shot.taken_at, Shot.id)
    rows = [(s, e) for s, e in session.execute(stmt.order_by(*order).limit(limit + 1))]
    more = len(rows) > limit
    rows = rows[:limit]
    last = (rows[-1][0].taken_at, rows[-1][0].id) if more and rows else None
    return rows, last


def count_shots(session: Session, campaign_id: int) -> int:
    return session.scalar(select(func.count()).select_from(Shot).where(Shot.campaign_id == campaign_id)) or 0


# --- re-evaluation --------------------------------------------------------------------------


def input_columns() -> list[str]:
    return [model.column_name(f.path) for f in model.INPUT_FIELDS]


def _is_stale(campaign_id: int, settings_version: int, model_version: str) -> ColumnElement[bool]:
    """Evaluations made with older settings or by another model version."""
    return and_(
        EVALUATIONS.c.campaign_id == campaign_id,
        or_(EVALUATIONS.c.settings_version < settings_version, EVALUATIONS.c.model_version != model_version),
    )


def count_stale(session: Session, campaign_id: int, settings_version: int, model_version: str) -> int:
    return (
        session.scalar(
            select(func.count()).select_from(EVALUATIONS).where(_is_stale(campaign_id, settings_version, model_version))
        )
        or 0
    )


def stale_inputs(
    session: Session, campaign_id: int, settings_version: int, model_version: str, limit: int
) -> tuple[list[int], dict[str, list[Any]]]:
    """Keys and input columns of shots evaluated with older settings or another model, oldest first."""
    names = input_columns()
    stmt = (
        select(SHOTS.c.id, *[SHOTS.c[name] for name in names])
        .join(EVALUATIONS, EVALUATIONS.c.shot_pk == SHOTS.c.id)
        .where(_is_stale(campaign_id, settings_version, model_version))
        .order_by(SHOTS.c.id)
        .limit(limit)
    )
    rows = session.execute(stmt).all()
    return [r[0] for r in rows], {name: [r[i + 1] for r in rows] for i, name in enumerate(names)}


def inputs_of(session: Session, shot_pks: Sequence[int]) -> dict[str, list[Any]]:
    """Input columns (``model.column_name``) of the given shots, in the order of ``shot_pks``."""
    names = input_columns()
    rows = session.execute(select(SHOTS.c.id, *[SHOTS.c[name] for name in names]).where(SHOTS.c.id.in_(list(shot_pks))))
    by_pk = {r[0]: r for r in rows}
    ordered = [by_pk[pk] for pk in shot_pks if pk in by_pk]
    return {name: [r[i + 1] for r in ordered] for i, name in enumerate(names)}


def campaign_ids_evaluated_by_other_model(session: Session, model_version: str) -> list[int]:
    """Campaigns holding any evaluation made by a model version other than ``model_version``."""
    return list(
        session.scalars(
            select(EVALUATIONS.c.campaign_id)
            .where(EVALUATIONS.c.model_version != model_version)
            .distinct()
            .order_by(EVALUATIONS.c.campaign_id)
        )
    )
