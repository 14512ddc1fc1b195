"""A file of shots into a campaign, in batches, through the ingest service.

For each batch of rows: the rows become shot bodies (``columns.shot_body``); the ingest
service's own validation (``payloads.prepare_all``) names every failing row's fields
(when it stops at its cap of problems, the batch's rows are checked one by one, so every
failing row is listed); the valid shots are compared with those earlier in the file and
with the stored ones by the ingest digest and differences (same shot id and payload:
unchanged; different: a conflict, never overwritten); the new ones are stored with
``ingest_shots`` (one transaction per batch: all or nothing). Failing and conflicting
rows are left out and reported; a dry run stores nothing and says what a run would do.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput, ShotConflict
from app.services.backlog_import import DEFAULT_BATCH
from app.services.backlog_import.columns import ColumnPlan, shot_body
from app.services.backlog_import.readers import SourceTable
from app.services.campaigns import require_campaign
from app.services.ingest.payloads import (
    DEFAULT_MAX_FUTURE,
    PreparedShot,
    differing_paths,
    prepare_all,
    stored_comparable,
)
from app.services.ingest.storing import ingest_shots
from app.store import shots as shot_store

_DEFAULTS = {f.path: f.default for f in model.INPUT_FIELDS}
Progress = Callable[[int, int], None]  # (rows done, rows in the file)


@dataclass(frozen=True)
class RowProblem:
    row: int
    field: str  # dotted path of the shot body, or "(row)" for the row as a whole
    reason: str
    column: str | None = None  # the file column behind the field


@dataclass(frozen=True)
class RowConflict:
    row: int
    shot_id: str
    fields: list[str]  # the differing dotted paths
    against: str  # "the stored shot" or "row N"


@dataclass
class ImportReport:
    campaign: str
    rows: int = 0
    stored: int = 0  # in a dry run: would be stored
    unchanged: int = 0
    conflicts: list[RowConflict] = field(default_factory=list)
    problems: list[RowProblem] = field(default_factory=list)  # every problem of every failing row
    dry_run: bool = False

    @property
    def failed(self) -> int:
        return len({p.row for p in self.problems})

    @property
    def clean(self) -> bool:
        return not self.problems and not self.conflicts


@dataclass
class _FirstSeen:
    row: int
    sha256: str
    conflict: RowConflict | None  # the first row's own conflict with the stored shot


def _index_and_field(path: str) -> tuple[int, str]:
    """``shots.3.plasma.density_cm3`` -> (3, "plasma.density_cm3"); (-1, path) for a path of no shot."""
    head, _, rest = path.partition(".")
    index, _, name = rest.partition(".")
    if head != "shots" or not index.isdigit():
        return -1, path
    return int(index), name or "(row)"


def _effective(document: Mapping[str, Any], path: str) -> Any:
    section, name = path.split(".", 1)
    block = document.get(section)
    value = block.get(name) if isinstance(block, Mapping) else None
    return _DEFAULTS[path] if value is None else value


def differences(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[str]:
    """``differing_paths`` of two comparable payloads, where an input left out (it took its
    default) and the same default written out are the same: our exports write every input
    as the shot was evaluated, so an export imported back into its own campaign is unchanged."""
    out = []
    for path in differing_paths(old, new):
        if path in model.SECTIONS:
            fields = [p for p in _DEFAULTS if p.startswith(path + ".")]
        elif path in _DEFAULTS:
            fields = [path]
        else:
            out.append(path)
            continue
        if any(differing_paths(_effective(old, p), _effective(new, p)) for p in fields):
            out.append(path)
    return out


def _one_by_one(
    bodies: Sequence[dict[str, Any]], max_future: timedelta
) -> tuple[list[tuple[int, PreparedShot]], dict[int, list[tuple[str, str]]]]:
    valid: list[tuple[int, PreparedShot]] = []
    failing: dict[int, list[tuple[str, str]]] = {}
    for i, body in enumerate(bodies):
        try:
            valid.append((i, prepare_all([body], batch=False, max_future=max_future).shots[0]))
        except InvalidInput as one:
            failing[i] = [("(row)" if p == "body" else p, r) for p, r in one.problems]
            if one.truncated:
                failing[i].append(("(row)", f"and {one.total - len(one.problems)} more problem(s)"))
    return valid, failing


def _validate(
    bodies: Sequence[dict[str, Any]], max_future: timedelta
) -> tuple[list[tuple[int, PreparedShot]], dict[int, list[tuple[str, str]]]]:
    """(position, prepared shot) of the valid bodies and the problems of the others, by
    position. The batch is checked at once; past the ingest cap of problems, body by body."""
    try:
        batch = prepare_all(bodies, batch=True, max_future=max_future)
        return [(s.index, s) for s in batch.shots], {}
    except InvalidInput as exc:
        if exc.truncated:
            return _one_by_one(bodies, max_future)
        failing: dict[int, list[tuple[str, str]]] = {}
        for path, reason in exc.problems:
            i, name = _index_and_field(path)
            failing.setdefault(i, []).append((name, reason))
        if -1 in failing:  # a problem of no one row
            return _one_by_one(bodies, max_future)
    valid = [i for i in range(len(bodies)) if i not in failing]
    if not valid:
        return [], failing
    try:
        batch = prepare_all([bodies[i] for i in valid], batch=True, max_future=max_future)
    except InvalidInput:
        return _one_by_one(bodies, max_future)
    return [(valid[s.index], s) for s in batch.shots], failing


def import_rows(
    session: Session,
    campaign_slug: str,
    source: SourceTable,
    plan: ColumnPlan,
    actor: str,
    *,
    dry_run: bool = False,
    batch_size: int = DEFAULT_BATCH,
    max_future: timedelta = DEFAULT_MAX_FUTURE,
    progress: Progress | None = None,
) -> ImportReport:
    """Import every row of ``source``; NotFound for an unknown campaign. Each batch is
    stored all or nothing; a dry run stores nothing."""
    campaign = require_campaign(session, campaign_slug)
    campaign_id = campaign.id
    session.rollback()  # end the read: every write below takes the campaign's write lock itself
    report = ImportReport(campaign_slug, rows=len(source), dry_run=dry_run)
    seen: dict[str, _FirstSeen] = {}

    def comparable_of_row(row: int) -> dict[str, Any]:
        body = shot_body(source.rows(row - 1, row)[0], plan, source)
        return prepare_all([body], batch=False, max_future=max_future).shots[0].comparable

    for start in range(0, len(source), batch_size):
        stop = min(start + batch_size, len(source))
        numbers: list[int] = []
        bodies: list[dict[str, Any]] = []
        for number, row in enumerate(source.rows(start, stop), start=start + 1):
            if number in source.row_problems:
                report.problems += [RowProblem(number, f, r) for f, r in source.row_problems[number]]
                continue
            numbers.append(number)
            bodies.append(shot_body(row, plan, source))
        valid, failing = _validate(bodies, max_future)
        for position in sorted(failing):
            report.problems += [RowProblem(numbers[position], f, r, plan.column_of(f)) for f, r in failing[position]]
        # Rows of shot ids met earlier in the file, then the stored shots.
        fresh: list[tuple[int, PreparedShot]] = []  # the first row of its shot id in the file
        first_in_batch: dict[str, tuple[int, PreparedShot]] = {}
        repeats: list[tuple[int, str]] = []  # identical to a first row of this batch: its outcome
        for position, shot in valid:
            number = numbers[position]
            earlier = seen.get(shot.shot_id)
            if earlier is not None:
                same = earlier.sha256 == shot.sha256
                paths = [] if same else differences(comparable_of_row(earlier.row), shot.comparable)
                if paths:
                    report.conflicts.append(RowConflict(number, shot.shot_id, paths, f"row {earlier.row}"))
                elif earlier.conflict is not None:
                    report.conflicts.append(
                        RowConflict(number, shot.shot_id, earlier.conflict.fields, earlier.conflict.against)
                    )
                else:
                    report.unchanged += 1
                continue
            first = first_in_batch.get(shot.shot_id)
            if first is None:
                first_in_batch[shot.shot_id] = (number, shot)
                fresh.append((number, shot))
                continue
            same = first[1].sha256 == shot.sha256
            paths = [] if same else differences(first[1].comparable, shot.comparable)
            if paths:
                report.conflicts.append(RowConflict(number, shot.shot_id, paths, f"row {first[0]}"))
            else:
                repeats.append((number, shot.shot_id))
        stored = shot_store.digests_by_shot_id(session, campaign_id, [s.shot_id for _, s in fresh])
        mismatched = [
            stored[s.shot_id].shot_pk
            for _, s in fresh
            if s.shot_id in stored and stored[s.shot_id].payload_sha256 != s.sha256
        ]
        old = shot_store.raw_payloads(session, mismatched)
        session.rollback()
        new: list[tuple[int, PreparedShot]] = []
        for number, shot in fresh:
            conflict = None
            digest = stored.get(shot.shot_id)
            if digest is None:
                new.append((number, shot))
            else:
                same = digest.payload_sha256 == shot.sha256
                paths = [] if same else differences(stored_comparable(old[digest.shot_pk]), shot.comparable)
                if paths:
                    conflict = RowConflict(number, shot.shot_id, paths, "the stored shot")
                    report.conflicts.append(conflict)
                else:
                    report.unchanged += 1
            seen[shot.shot_id] = _FirstSeen(number, shot.sha256, conflict)
        for number, shot_id in repeats:
            first_conflict = seen[shot_id].conflict
            if first_conflict is not None:
                report.conflicts.append(RowConflict(number, shot_id, first_conflict.fields, first_conflict.against))
            else:
                report.unchanged += 1
        if dry_run:
            report.stored += len(new)
        else:
            _store(session, campaign_slug, new, bodies, numbers, actor, max_future, report)
        if progress:
            progress(stop, len(source))
    report.problems.sort(key=lambda p: p.row)
    report.conflicts.sort(key=lambda c: c.row)
    return report


def _store(
    session: Session,
    campaign_slug: str,
    new: list[tuple[int, PreparedShot]],
    bodies: Sequence[dict[str, Any]],
    numbers: Sequence[int],
    actor: str,
    max_future: timedelta,
    report: ImportReport,
) -> None:
    """Store the new shots of a batch in one ingest call. A shot stored by someone else
    since the comparison (a conflict) or a body that has turned invalid (its taken_at
    has left the window) is reported and the rest of the batch is tried again."""
    position_of = {n: p for p, n in enumerate(numbers)}
    pending = [(number, bodies[position_of[number]]) for number, _ in new]
    shot_ids = {number: shot.shot_id for number, shot in new}
    while pending:
        try:
            result = ingest_shots(
                session, campaign_slug, [b for _, b in pending], actor, batch=True, max_future=max_future
            )
        except ShotConflict as exc:
            differing: dict[int, list[str]] = {}
            for path, _reason in exc.problems:
                i, name = _index_and_field(path)
                if 0 <= i < len(pending):
                    differing.setdefault(i, []).append(name)
            if not differing:  # not named by row: the whole batch is held back
                differing = {i: ["(document)"] for i in range(len(pending))}
            report.conflicts += [
                RowConflict(pending[i][0], shot_ids[pending[i][0]], names, "the stored shot")
                for i, names in sorted(differing.items())
            ]
            pending = [p for i, p in enumerate(pending) if i not in differing]
            continue
        except InvalidInput as exc:
            failing: dict[int, list[tuple[str, str]]] = {}
            for path, reason in exc.problems:
                i, name = _index_and_field(path)
                if 0 <= i < len(pending):
                    failing.setdefault(i, []).append((name, reason))
            if not failing:  # not named by row: the whole batch is held back
                failing = {i: [("(row)", exc.detail)] for i in range(len(pending))}
            report.problems += [RowProblem(pending[i][0], f, r) for i, fs in sorted(failing.items()) for f, r in fs]
            pending = [p for i, p in enumerate(pending) if i not in failing]
            continue
        report.stored += result.count("created")
        report.unchanged += result.count("unchanged") + result.count("duplicate_in_batch")
        return
