"""Read queries behind the dashboard pages.

Everything that scales with the number of shots is aggregated or decimated in SQL,
so a 100,000-shot campaign sends the web process only a few thousand rows per chart.
All datetimes bound here are UTC (SQLite stores them without an offset).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy import (
    ColumnElement,
    Select,
    String,
    and_,
    case,
    cast,
    func,
    or_,
    select,
    type_coerce,
)
from sqlalchemy.orm import Session

import model
from app.store.exclusions import counted
from app.tables import AuditEntry, Campaign, Evaluation, Flag, Job, Shot, ShotRevision
from app.times import as_utc

STATUSES = model.STATUSES
# Sorting by status means sorting by severity (the status rank), not alphabetically.
STATUS_RANK = case(*((Evaluation.status == name, rank) for rank, name in enumerate(STATUSES) if rank), else_=0)

# Numeric columns a user may put on a regime-map axis or sort the table by.
INPUT_COLUMNS: dict[str, ColumnElement[Any]] = {
    c.name: c
    for c in Shot.__table__.columns
    if c.name.split("_", 1)[0] in model.SECTIONS and c.type.python_type in (float, int)
}
OUTPUT_COLUMNS: dict[str, ColumnElement[Any]] = {
    c.name: c
    for c in Evaluation.__table__.columns
    if c.name not in ("shot_pk", "campaign_id", "settings_version") and c.type.python_type is float
}
NUMERIC_COLUMNS: dict[str, ColumnElement[Any]] = {**INPUT_COLUMNS, **OUTPUT_COLUMNS}


# --------------------------------------------------------------------------- campaigns


def campaigns_with_status_counts(session: Session) -> list[tuple[Campaign, dict[str, int], datetime | None]]:
    """Every campaign, its counted shots by status and the time of its latest counted shot."""
    campaigns = list(session.scalars(select(Campaign).order_by(Campaign.name, Campaign.slug)))
    counts: dict[int, dict[str, int]] = {c.id: dict.fromkeys(STATUSES, 0) for c in campaigns}
    for campaign_id, status, n in session.execute(
        select(Evaluation.campaign_id, Evaluation.status, func.count())
        .where(*counted(Evaluation.shot_pk))
        .group_by(Evaluation.campaign_id, Evaluation.status)
    ):
        counts.setdefault(campaign_id, dict.fromkeys(STATUSES, 0))[status] = n
    latest = dict(
        session.execute(
            select(Shot.campaign_id, func.max(Shot.taken_at)).where(*counted(Shot.id)).group_by(Shot.campaign_id)
        ).all()
    )
    return [(c, counts[c.id], as_utc(latest.get(c.id))) for c in campaigns]


# ------------------------------------------------------------------------------ counts


def status_counts(
    session: Session, campaign_id: int, *, upto_pk: int | None = None, after_pk: int | None = None
) -> dict[str, int]:
    """Counted shots by status (stored up to ``upto_pk``; with ``after_pk``, only those stored after it)."""
    counts = dict.fromkeys(STATUSES, 0)
    rows = session.execute(
        select(Evaluation.status, func.count())
        .where(
            _of_campaign(Evaluation.campaign_id, campaign_id, after_pk),
            *counted(Evaluation.shot_pk, campaign_id),
            *_upto(upto_pk, after_pk),
        )
        .group_by(Evaluation.status)
    )
    for status, n in rows:
        counts[status] = n
    return counts


@dataclass(frozen=True)
class FlagCount:
    code: str
    severity: str
    shots: int


def flag_counts(
    session: Session, campaign_id: int, *, upto_pk: int | None = None, after_pk: int | None = None
) -> list[FlagCount]:
    """Counted shots by flag code and severity (as status_counts)."""
    keys = [] if upto_pk is None else [Flag.shot_pk <= upto_pk]
    if after_pk is not None:
        keys.append(Flag.shot_pk > after_pk)
    rows = session.execute(
        select(Flag.code, Flag.severity, func.count())
        .where(_of_campaign(Flag.campaign_id, campaign_id, after_pk), *counted(Flag.shot_pk, campaign_id), *keys)
        .group_by(Flag.code, Flag.severity)
        .order_by(Flag.code, Flag.severity)
    )
    return [FlagCount(code, severity, n) for code, severity, n in rows]


def latest_taken_at(session: Session, campaign_id: int) -> datetime | None:
    """When the campaign's latest counted shot was taken (UTC), None for a campaign without one."""
    return as_utc(
        session.scalar(
            select(func.max(Shot.taken_at)).where(Shot.campaign_id == campaign_id, *counted(Shot.id, campaign_id))
        )
    )


def latest_shot_pk(session: Session, campaign_id: int) -> int:
    """The campaign's latest shot id (0 for none): one seek of the (campaign_id, id) index."""
    stmt = select(Shot.id).where(Shot.campaign_id == campaign_id).order_by(Shot.id.desc()).limit(1)
    return session.scalar(stmt) or 0


def campaigns_by_latest_shot(session: Session, limit: int) -> list[Campaign]:
    """The ``limit`` campaigns with shots whose latest shot is the newest, newest first (one
    seek of the (campaign_id, id) index per campaign)."""
    latest = select(func.max(Shot.id)).where(Shot.campaign_id == Campaign.id).scalar_subquery()
    return list(session.scalars(select(Campaign).where(latest.is_not(None)).order_by(latest.desc()).limit(limit)))


UNFINISHED_JOB_STATES = ("queued", "running")

Marks = tuple[int, int, tuple[tuple[str, str, str, int], ...]]


def change_marks(session: Session, campaign: Campaign) -> Marks:
    """What moves whenever the campaign's counts may change, from three index seeks: its
    latest shot id, its latest audited write (ingests, corrections, settings, exclusions:
    each is written under the campaign's writer lock, so its entries become visible in the
    order of their ids), and its queued and running jobs with their progress (a
    re-evaluation rewrites statuses as it goes; a queued one is listed too, so that its end
    moves the marks even when no read fell while it ran)."""
    latest_audit = (
        session.scalar(
            select(AuditEntry.id)
            .where(AuditEntry.campaign_slug == campaign.slug)
            .order_by(AuditEntry.id.desc())
            .limit(1)
        )
        or 0
    )
    unfinished = session.execute(
        select(Job.id, Job.kind, Job.state, Job.done)
        .where(Job.state.in_(UNFINISHED_JOB_STATES), Job.campaign_id == campaign.id)
        .order_by(Job.id)
    ).all()
    return (
        latest_shot_pk(session, campaign.id),
        latest_audit,
        tuple((str(i), kind, state, int(d or 0)) for i, kind, state, d in unfinished),
    )


def audit_actions_between(session: Session, campaign: Campaign, after_id: int, upto_id: int) -> set[str]:
    """The actions of the campaign's audit entries after ``after_id`` up to ``upto_id``."""
    if upto_id <= after_id:
        return set()
    stmt = (
        select(AuditEntry.action)
        .where(AuditEntry.campaign_slug == campaign.slug, AuditEntry.id > after_id, AuditEntry.id <= upto_id)
        .distinct()
    )
    return set(session.scalars(stmt))


def excluded_count(session: Session, campaign_id: int) -> int:
    """How many of the campaign's shots are excluded (kept, counted nowhere)."""
    return (
        session.scalar(
            select(func.count())
            .select_from(Shot)
            .where(Shot.campaign_id == campaign_id, *counted(Shot.id, campaign_id, "only"))
        )
        or 0
    )


# ---------------------------------------------------------------------- series (charts)


@dataclass
class Series:
    """Column-wise rows of one chart trace (one status)."""

    columns: dict[str, list[Any]]
    total: int  # shots of this status that have the plotted values
    step: int = 1  # about every step-th shot kept (1: all)

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()), []))


def _of_campaign(key: Any, campaign_id: int, after_pk: int | None) -> ColumnElement[bool]:
    """The campaign term of a query on ``key``'s table. Read after a shot key (a few new shots),
    it stays off the campaign's indexes ("+ 0"): SQLite otherwise walks the campaign's whole
    index checking the key range on each entry (15 ms a query at 100,000 shots, not 0.1 ms)."""
    return (key + 0 if after_pk is not None else key) == campaign_id


def _evaluated(campaign_id: int, after_pk: int | None = None) -> Select[Any]:
    # Evaluations first: their (campaign_id, status) index holds every shot key, so a status,
    # the snapshot bound and the 1-in-k thinning (shot key modulo k) are decided in the index
    # and only the shots kept are read. (With a campaign term on shots as well, SQLite walked
    # the campaign's shots in time order and read every one: 50-150 ms a chart at 100,000.)
    # Every chart and figure counts the counted shots only (app.store.exclusions).
    return (
        select()
        .select_from(Evaluation)
        .join(Shot, Shot.id == Evaluation.shot_pk)
        .where(_of_campaign(Evaluation.campaign_id, campaign_id, after_pk), *counted(Evaluation.shot_pk, campaign_id))
    )


def _upto(upto_pk: int | None, after_pk: int | None = None) -> list[ColumnElement[bool]]:
    # Charts are drawn from a snapshot (shots up to the live cursor) so that live updates
    # extend them with exactly the shots stored later; ``after_pk`` reads only those later
    # shots (a campaign's shot keys grow in the order its shots are stored: its writers queue).
    out = [] if upto_pk is None else [Evaluation.shot_pk <= upto_pk]
    return out if after_pk is None else [Evaluation.shot_pk > after_pk, *out]


def _one_in(step: int) -> list[ColumnElement[bool]]:
    """Every step-th shot by key (none left out for 1): read from the index, no sort of the campaign."""
    return [] if step <= 1 else [Evaluation.shot_pk % step == 0]


def thinning_step(total: int, max_points: int) -> int:
    """k of "every k-th shot by key" that keeps at most about ``max_points`` of ``total`` shots."""
    return -(-total // max_points) if total > max_points else 1


def counts_with_values(
    session: Session, campaign_id: int, required: Sequence[ColumnElement[Any]], *, upto_pk: int | None = None
) -> dict[str, int]:
    """Shots per status (stored up to ``upto_pk``) whose ``required`` columns are all set; without
    any, from the evaluations' index alone."""
    return counts_with_values_of(session, campaign_id, {"": required}, upto_pk=upto_pk)[""]


def counts_with_values_of(
    session: Session,
    campaign_id: int,
    sets: Mapping[str, Sequence[ColumnElement[Any]]],
    *,
    upto_pk: int | None = None,
    after_pk: int | None = None,
) -> dict[str, dict[str, int]]:
    """counts_with_values of each named set of columns, all from one pass over the campaign (at
    100,000 shots one pass for three sets cost 100 ms of CPU, three passes 240 ms); with
    ``after_pk``, of the shots stored after it only."""
    base = (
        _evaluated(campaign_id, after_pk)
        if any(sets.values())
        else select()
        .select_from(Evaluation)
        .where(_of_campaign(Evaluation.campaign_id, campaign_id, after_pk), *counted(Evaluation.shot_pk, campaign_id))
    )
    tallies = [
        func.sum(case((and_(*(c.is_not(None) for c in columns)), 1), else_=0)) if columns else func.count()
        for columns in sets.values()
    ]
    counts = {name: dict.fromkeys(STATUSES, 0) for name in sets}
    rows = _plain_rows(
        session,
        base.where(*_upto(upto_pk, after_pk))
        .with_only_columns(Evaluation.status, *tallies)
        .group_by(Evaluation.status),
    )
    for status, *numbers in rows:
        for name, n in zip(sets, numbers, strict=True):
            counts[name][status] = int(n or 0)
    return counts


# The rows of a series carry their place in time order first: (taken_at as stored, shot key, *columns).
SeriesRow = tuple[Any, ...]
# taken_at as the driver gives it, for ordering only: SQLite's text sorts in time order (see
# tables.UTCDateTime) and PostgreSQL's driver gives datetimes; turning every row's into a UTC
# datetime cost 20-30 ms of CPU per 10,000 rows.
_TIME_ORDER = type_coerce(Shot.taken_at, String).label("time_order")


def series_order(row: SeriesRow) -> tuple[Any, Any]:
    """Where a series row goes in time order (taken_at, then the shot key, as the SQL orders them)."""
    return row[0], row[1]


def _plain_rows(session: Session, stmt: Select[Any] | Any) -> list[tuple[Any, ...]]:
    # Core rows from the connection: the ORM's row handling cost as much again as the read.
    return [tuple(row) for row in session.connection().execute(stmt)]


def status_rows(
    session: Session,
    campaign_id: int,
    status: str,
    columns: Sequence[ColumnElement[Any]],
    *,
    step: int,
    required: Sequence[ColumnElement[Any]] = (),
    required_any: Sequence[Sequence[ColumnElement[Any]]] = (),
    upto_pk: int | None = None,
    after_pk: int | None = None,
) -> list[SeriesRow]:
    """Every ``step``-th shot by key of one status that has the ``required`` columns (and, given
    ``required_any``, all the columns of at least one of those sets), in time order, as (taken_at,
    shot key, *columns); with ``after_pk``, of the shots stored after it only."""
    stmt = (
        _evaluated(campaign_id, after_pk)
        .where(
            Evaluation.status == status,
            *_one_in(step),  # decided in the index, before a row is read
            *_upto(upto_pk, after_pk),
            *(c.is_not(None) for c in required),
            *_having_any(required_any),
        )
        .with_only_columns(_TIME_ORDER, Shot.id, *columns)
        .order_by(Shot.taken_at, Shot.id)
    )
    return _plain_rows(session, stmt)


def _having_any(sets: Sequence[Sequence[ColumnElement[Any]]]) -> list[ColumnElement[bool]]:
    """Rows with every column of at least one of ``sets`` set (none asked, or an empty set: every row)."""
    if not sets or any(not columns for columns in sets):
        return []
    return [or_(*(and_(*(c.is_not(None) for c in columns)) for columns in sets))]


def series_of_rows(
    rows: Sequence[SeriesRow], names: Sequence[str], *, total: int, step: int, max_points: int
) -> Series:
    """The rows of status_rows as a Series of their columns ``names``, at most ``max_points`` rows: past
    it (the kept keys of this status were denser than average) thinned evenly."""
    if len(rows) > max_points:
        keep = (
            sorted({round(i * (len(rows) - 1) / (max_points - 1)) for i in range(max_points)})
            if max_points > 1
            else [0]
        )
        rows, step = [rows[i] for i in keep], -(-total // len(keep))
    columns = list(zip(*rows, strict=True)) if rows else [() for _ in range(2 + len(names))]
    return Series({name: list(values) for name, values in zip(names, columns[2:], strict=True)}, total, step)


# --------------------------------------------------------------------------- statistics


@dataclass
class PhaseRows:
    """Shots with a measured phase, in taken_at order, thinned to about every ``step``-th."""

    pk: list[int]
    phase: list[float]
    sources: dict[str, list[float | None]]  # the phase-jitter sources by dotted path (density, population, ...)
    total: int  # shots with a measured phase (before thinning)
    step: int = 1
    time_order: list[Any] = field(default_factory=list)  # taken_at as stored (series_order)


def phase_series_rows(
    session: Session,
    campaign_id: int,
    sources: Sequence[str],
    *,
    step: int,
    upto_pk: int | None = None,
    after_pk: int | None = None,
) -> list[SeriesRow]:
    """Every ``step``-th shot by key with a measured phase, in time order, as (taken_at, shot key,
    phase, *sources); with ``after_pk``, of the shots stored after it only."""
    columns = [getattr(Shot, model.column_name(path)) for path in sources]
    phase = Shot.measured_modulation_phase_rad
    stmt = (
        _evaluated(campaign_id, after_pk)
        .where(*_one_in(step), *_upto(upto_pk, after_pk), phase.is_not(None))
        .with_only_columns(_TIME_ORDER, Shot.id, phase, *columns)
        .order_by(Shot.taken_at, Shot.id)
    )
    return _plain_rows(session, stmt)


def phase_rows_of(rows: Sequence[SeriesRow], sources: Sequence[str], *, total: int, step: int) -> PhaseRows:
    values = [list(c) for c in zip(*rows, strict=False)] if rows else [[] for _ in range(3 + len(sources))]
    return PhaseRows(values[1], values[2], dict(zip(sources, values[3:], strict=True)), total, step, list(values[0]))


def phase_rows(
    session: Session,
    campaign_id: int,
    sources: Sequence[str],
    *,
    max_rows: int,
    upto_pk: int | None = None,
    total: int | None = None,
) -> PhaseRows:
    """Measured phase and the logged jitter sources (dotted input paths) of the evaluated shots that
    have a measured phase, in taken_at order (the shot-to-shot figures compare neighbours in time),
    at most about ``max_rows`` of them (shot id modulo k past that, so the whole campaign stays
    covered). ``total``: how many shots have a measured phase, when the caller has counted them."""
    if total is None:
        phase = Shot.measured_modulation_phase_rad
        base = _evaluated(campaign_id).where(phase.is_not(None), *_upto(upto_pk))
        total = session.scalar(base.with_only_columns(func.count())) or 0
    step = thinning_step(total, max_rows)
    rows = phase_series_rows(session, campaign_id, sources, step=step, upto_pk=upto_pk)
    return phase_rows_of(rows, sources, total=total, step=step)


def taken_at_of(session: Session, shot_pks: Sequence[int]) -> dict[int, datetime]:
    """When each of a few shots (by primary key) was taken, UTC."""
    if not shot_pks:
        return {}
    rows = session.execute(select(Shot.id, Shot.taken_at).where(Shot.id.in_(list(set(shot_pks)))))
    return {pk: as_utc(t) for pk, t in rows}


def density_offsets_read(
    session: Session, campaign_id: int, *, step: int, upto_pk: int | None = None, after_pk: int | None = None
) -> list[float]:
    """Implied/set density − 1 of every ``step``-th shot by key with an implied density (decided in
    the index, before a row is read: no sort); with ``after_pk``, of the shots stored after it only."""
    ratio = Evaluation.implied_density_cm3 / Shot.plasma_density_cm3 - 1.0
    stmt = (
        _evaluated(campaign_id, after_pk)
        .where(*_one_in(step), *_upto(upto_pk, after_pk), Evaluation.implied_density_cm3.is_not(None))
        .with_only_columns(ratio)
    )
    return [float(v) for (v,) in _plain_rows(session, stmt) if v is not None]


def density_offsets(
    session: Session, campaign_id: int, total: int, *, max_rows: int, upto_pk: int | None = None
) -> tuple[list[float], int]:
    """Implied/set density − 1 of the shots with an implied density (``total`` of them, counted
    by the caller), at most about ``max_rows`` of them (every k-th by shot key past that), and k."""
    step = thinning_step(total, max_rows)
    return density_offsets_read(session, campaign_id, step=step, upto_pk=upto_pk), step


# ------------------------------------------------------------------------------- table


@dataclass
class ShotFilter:
    status: str | None = None
    flag_code: str | None = None
    taken_from: datetime | None = None
    taken_to: datetime | None = None
    seed_method: str | None = None
    text: str | None = None
    excluded: str = "omit"  # app.store.exclusions.EXCLUDED_MODES

    def conditions(self, campaign_id: int) -> list[ColumnElement[bool]]:
        out: list[ColumnElement[bool]] = [
            Shot.campaign_id == campaign_id,
            *counted(Shot.id, campaign_id, self.excluded),
        ]
        if self.status:
            out.append(Evaluation.status == self.status)
        if self.flag_code:
            out.append(
                Shot.id.in_(select(Flag.shot_pk).where(Flag.campaign_id == campaign_id, Flag.code == self.flag_code))
            )
        if self.taken_from:
            out.append(Shot.taken_at >= as_utc(self.taken_from))
        if self.taken_to:
            out.append(Shot.taken_at < as_utc(self.taken_to))
        if self.seed_method:
            out.append(Shot.seed_method == self.seed_method)
        if self.text:
            pattern = "%" + _escape_like(self.text.lower()) + "%"
            out.append(
                or_(
                    func.lower(Shot.notes).like(pattern, escape="\\"),
                    func.lower(cast(Shot.tags, String)).like(pattern, escape="\\"),
                    func.lower(Shot.shot_id).like(pattern, escape="\\"),
                )
            )
        return out


def _escape_like(text: str) -> str:
    return text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")


# Table columns a user may sort by: name -> SQL expression.
SORT_COLUMNS: dict[str, Any] = {
    "taken_at": Shot.taken_at,
    "shot_id": Shot.shot_id,
    "status": STATUS_RANK,
    "revision": Shot.revision,
    "seed_method": Shot.seed_method,
    **NUMERIC_COLUMNS,
}


@dataclass
class ShotRow:
    pk: int
    shot_id: str
    taken_at: datetime
    revision: int
    status: str
    species: str
    seed_method: str
    notes: str
    tags: list[str]
    values: dict[str, float | None]
    flags: list[tuple[str, str]] = field(default_factory=list)  # (code, severity)
    excluded_reason: str | None = None  # set for an excluded shot (listed on request)

    @property
    def excluded(self) -> bool:
        return self.excluded_reason is not None


def _table_query(campaign_id: int, flt: ShotFilter) -> Select[Any]:
    return (
        select().select_from(Shot).join(Evaluation, Evaluation.shot_pk == Shot.id).where(*flt.conditions(campaign_id))
    )


def count_shots(session: Session, campaign_id: int, flt: ShotFilter) -> int:
    return session.scalar(_table_query(campaign_id, flt).with_only_columns(func.count())) or 0


def _row_columns(value_columns: Sequence[str]) -> list[Any]:
    return [
        Shot.id,
        Shot.shot_id,
        Shot.taken_at,
        Shot.revision,
        Evaluation.status,
        Shot.driver_species,
        Shot.seed_method,
        Shot.notes,
        Shot.tags,
        Shot.excluded_reason,
        *(NUMERIC_COLUMNS[name].label(name) for name in value_columns),
    ]


def _to_row(row: Sequence[Any], value_columns: Sequence[str]) -> ShotRow:
    pk, shot_id, taken_at, revision, status, species, seed_method, notes, tags, excluded_reason = row[:10]
    return ShotRow(
        pk=pk,
        shot_id=shot_id,
        taken_at=as_utc(taken_at),
        revision=revision,
        status=status,
        species=species,
        seed_method=seed_method,
        notes=notes or "",
        tags=list(tags or []),
        values=dict(zip(value_columns, row[10:], strict=False)),
        excluded_reason=excluded_reason,
    )


def _attach_flags(session: Session, rows: list[ShotRow]) -> None:
    by_pk = {r.pk: r for r in rows}
    if not by_pk:
        return
    for pk, code, severity in session.execute(
        select(Flag.shot_pk, Flag.code, Flag.severity)
        .where(Flag.shot_pk.in_(list(by_pk)))
        .order_by(Flag.shot_pk, Flag.id)
    ):
        by_pk[pk].flags.append((code, severity))


def shot_page(
    session: Session,
    campaign_id: int,
    flt: ShotFilter,
    *,
    sort: str,
    descending: bool,
    offset: int,
    limit: int,
    value_columns: Sequence[str],
) -> list[ShotRow]:
    key = SORT_COLUMNS[sort]
    order = (key.desc(), Shot.id.desc()) if descending else (key.asc(), Shot.id.asc())
    stmt = (
        _table_query(campaign_id, flt)
        .with_only_columns(*_row_columns(value_columns))
        .order_by(*order)
        .offset(offset)
        .limit(limit)
    )
    rows = [_to_row(r, value_columns) for r in session.execute(stmt)]
    _attach_flags(session, rows)
    return rows


def shots_after(
    session: Session, campaign_id: int, after_pk: int, *, limit: int, value_columns: Sequence[str]
) -> list[ShotRow]:
    """Shots stored after ``after_pk`` (the live cursor), oldest first, at most ``limit``."""
    stmt = (
        _table_query(campaign_id, ShotFilter())
        .where(Shot.id > after_pk)
        .with_only_columns(*_row_columns(value_columns))
        .order_by(Shot.id)
        .limit(limit)
    )
    rows = [_to_row(r, value_columns) for r in session.execute(stmt)]
    _attach_flags(session, rows)
    return rows


# ------------------------------------------------------------------------- one shot


def shot_with_evaluation(session: Session, campaign_id: int, shot_id: str) -> tuple[Shot, Evaluation | None] | None:
    shot = session.scalar(select(Shot).where(Shot.campaign_id == campaign_id, Shot.shot_id == shot_id))
    if shot is None:
        return None
    evaluation = session.get(Evaluation, shot.id)
    return shot, evaluation


def shot_flags(session: Session, shot_pk: int) -> list[Flag]:
    return list(session.scalars(select(Flag).where(Flag.shot_pk == shot_pk).order_by(Flag.id)))


def shot_revisions(session: Session, shot_pk: int) -> list[ShotRevision]:
    return list(
        session.scalars(select(ShotRevision).where(ShotRevision.shot_pk == shot_pk).order_by(ShotRevision.revision))
    )


def neighbour_shot_ids(session: Session, campaign_id: int, shot: Shot) -> tuple[str | None, str | None]:
    """The shot ids just before and after this one in time order."""
    before = session.scalar(
        select(Shot.shot_id)
        .where(
            Shot.campaign_id == campaign_id,
            or_(Shot.taken_at < shot.taken_at, and_(Shot.taken_at == shot.taken_at, Shot.id < shot.id)),
        )
        .order_by(Shot.taken_at.desc(), Shot.id.desc())
        .limit(1)
    )
    after = session.scalar(
        select(Shot.shot_id)
        .where(
            Shot.campaign_id == campaign_id,
            or_(Shot.taken_at > shot.taken_at, and_(Shot.taken_at == shot.taken_at, Shot.id > shot.id)),
        )
        .order_by(Shot.taken_at, Shot.id)
        .limit(1)
    )
    return before, after


def latest_job(session: Session, campaign_id: int, kind: str) -> Job | None:
    return session.scalar(
        select(Job).where(Job.campaign_id == campaign_id, Job.kind == kind).order_by(Job.created_at.desc()).limit(1)
    )
