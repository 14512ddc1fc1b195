"""Ingest: validate, de-duplicate, evaluate (vectorised) and store shots in one transaction.

``ingest_shots`` is the single entry point for the API (one shot or a batch) and for
the demo generator. Nothing is half-written: the whole call commits or nothing does.

Replay rules: a shot id already stored with an identical payload is ``unchanged``
(nothing is written); with a different payload the whole call is refused (409) and the
differing fields are named. Identical duplicates inside one batch are stored once
(``duplicate_in_batch``); differing duplicates refuse the batch (409). "Identical"
compares numbers by value (250 == 250.0) and taken_at as an instant.
"""

from __future__ import annotations

import gc
import hashlib
import json
import math
import threading
import time
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any

import numpy as np
from pydantic import TypeAdapter, ValidationError
from sqlalchemy.orm import Session, sessionmaker

import model
from app.database import begin_write, run_write
from app.problems import SHOT_CONFLICT, FieldProblem, ProblemError, invalid_input, not_found, pydantic_problems
from app.schemas import ShotEnvelope
from app.services import metrics
from app.services.campaigns import campaign_lock, get_campaign_or_404
from app.services.jobs import Progress
from app.store import audit
from app.store import shots as shot_store
from app.tables import Campaign, Shot

_ENVELOPE = TypeAdapter(ShotEnvelope)
SECTIONS = ("driver", "plasma", "seed", "measured")

_gc_lock = threading.Lock()
_gc_pause = {"pausers": 0, "was_enabled": True}


@contextmanager
def cyclic_gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while a batch is ingested.

    A 5,000-shot batch allocates about a million small acyclic objects; the collector's
    repeated full passes over them cost a third of the ingest time and free nothing.
    Reference counting still frees everything; collection resumes when the last
    concurrent ingest leaves (and only if it was on before the first came in).
    """
    with _gc_lock:
        if _gc_pause["pausers"] == 0:
            _gc_pause["was_enabled"] = gc.isenabled()
            gc.disable()
        _gc_pause["pausers"] += 1
    try:
        yield
    finally:
        with _gc_lock:
            _gc_pause["pausers"] -= 1
            if _gc_pause["pausers"] == 0 and _gc_pause["was_enabled"]:
                gc.enable()


# --- inputs as columns ----------------------------------------------------------------------------


def column_name(path: str) -> str:
    """Shot table column of an input path: driver.sigma_z_mm -> driver_sigma_z_mm."""
    return path.replace(".", "_")


def _object_array(values: list[Any]) -> np.ndarray:
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out


_NUMBER_OR_ABSENT = (int, float, type(None))


def payload_columns(payloads: Sequence[Mapping[str, Any]]) -> dict[str, np.ndarray]:
    """Dotted-path columns of the known inputs, None (or NaN) where absent.

    Numeric columns holding only numbers are float arrays, which the model checks much
    faster than object arrays; anything else stays as posted for the model to refuse.
    """
    blocks = {sec: [p.get(sec) or {} for p in payloads] for sec in SECTIONS}
    columns: dict[str, np.ndarray] = {}
    for f in model.INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        values = [b.get(name) for b in blocks[section]]
        if f.kind != "enum" and all(type(v) in _NUMBER_OR_ABSENT for v in values):
            columns[f.path] = np.array(values, dtype=float)
        else:
            columns[f.path] = _object_array(values)
    return columns


def model_columns(inputs: Mapping[str, Sequence[Any]]) -> dict[str, np.ndarray]:
    """Dotted-path columns for model.evaluate_table from shot table input columns."""
    columns: dict[str, np.ndarray] = {}
    for f in model.INPUT_FIELDS:
        values = inputs[column_name(f.path)]
        columns[f.path] = _object_array(list(values)) if f.kind == "enum" else np.array(values, dtype=float)
    return columns


def input_column_values(clean: Mapping[str, np.ndarray]) -> dict[str, list[Any]]:
    """Shot table input columns from validated model columns (NaN -> None, integers as int)."""
    out: dict[str, list[Any]] = {}
    for f in model.INPUT_FIELDS:
        values = clean[f.path].tolist()
        if f.kind == "enum":
            out[column_name(f.path)] = [str(v) for v in values]
        elif f.kind == "integer":
            out[column_name(f.path)] = [None if v != v else int(v) for v in values]
        else:
            out[column_name(f.path)] = [None if v != v else float(v) for v in values]
    return out


_FLOAT_MAX = 1.7976931348623157e308


def _unrepresentable_inputs(payload: Mapping[str, Any]) -> list[FieldProblem]:
    """Input fields holding an integer too large for a float (JSON allows any size)."""
    problems = []
    for f in model.INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        block = payload.get(section)
        value = block.get(name) if isinstance(block, Mapping) else None
        if type(value) is int and abs(value) > _FLOAT_MAX:
            problems.append((f.path, "out of range (too large for a floating-point number)"))
    return problems


def needs_single_check(payload: Mapping[str, Any]) -> bool:
    """Shots whose problems only the per-shot check sees: a section that is not an
    object, or seed fields without a seed method."""
    for section in SECTIONS:
        block = payload.get(section)
        if block is not None and not isinstance(block, Mapping):
            return True
    seed = payload.get("seed")
    return isinstance(seed, Mapping) and seed.get("method") is None and any(v is not None for v in seed.values())


# --- identity of a payload: digest and differences -------------------------------------------------


def comparable_payload(payload: Mapping[str, Any], taken_at: datetime) -> dict[str, Any]:
    """The payload as compared for replays: taken_at as the UTC instant, in any offset written."""
    return {**payload, "taken_at": format_utc(taken_at)}


def payload_digest(comparable: Mapping[str, Any]) -> str:
    """sha256 of the sorted JSON; raises ValueError for NaN or infinity anywhere."""
    text = json.dumps(comparable, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def differing_paths(old: Any, new: Any, prefix: str = "") -> list[str]:
    """Dotted paths of every leaf that differs between two JSON documents.

    Numbers compare by value (250 == 250.0), so a digest mismatch with no differing
    path is still the same shot.
    """
    if isinstance(old, Mapping) and isinstance(new, Mapping):
        out: list[str] = []
        for key in list(old) + [k for k in new if k not in old]:
            path = f"{prefix}.{key}" if prefix else str(key)
            if key not in old or key not in new:
                out.append(path)
            else:
                out += differing_paths(old[key], new[key], path)
        return out
    if isinstance(old, list) and isinstance(new, list) and len(old) == len(new):
        out = []
        for i, (a, b) in enumerate(zip(old, new)):
            out += differing_paths(a, b, f"{prefix}.{i}" if prefix else str(i))
        return out
    if isinstance(old, bool) or isinstance(new, bool):
        same = old is new
    else:
        same = type(old) in (int, float) and type(new) in (int, float) and old == new or (
            type(old) is type(new) and old == new)
    return [] if same else [prefix or "(document)"]


def format_utc(when: datetime) -> str:
    """ISO 8601 in UTC with a Z suffix; milliseconds (or microseconds) only when present."""
    when = when.astimezone(timezone.utc)
    text = when.strftime("%Y-%m-%dT%H:%M:%S")
    if when.microsecond % 1000:
        text += f".{when.microsecond:06d}"
    elif when.microsecond:
        text += f".{when.microsecond // 1000:03d}"
    return text + "Z"


# --- validation -----------------------------------------------------------------------------------


@dataclass
class PreparedShot:
    """One valid shot body, ready to store."""

    index: int  # position in the request
    payload: dict[str, Any]  # verbatim, as posted
    shot_id: str
    taken_at: datetime  # UTC
    notes: str
    tags: list[str]
    position: int  # row in PreparedBatch.inputs
    comparable: dict[str, Any]
    sha256: str


@dataclass
class PreparedBatch:
    """Valid shots of one request and their model inputs as shot table columns."""

    shots: list[PreparedShot]
    inputs: dict[str, list[Any]]  # input column -> values (defaults applied), by position

    def input_columns(self, shots: Sequence[PreparedShot]) -> dict[str, list[Any]]:
        positions = [s.position for s in shots]
        return {name: [values[k] for k in positions] for name, values in self.inputs.items()}


def _non_finite_paths(value: Any, prefix: str = "") -> list[FieldProblem]:
    if isinstance(value, float):
        return [] if math.isfinite(value) else [(prefix, "NaN or infinity is not allowed")]
    if isinstance(value, Mapping):
        out: list[FieldProblem] = []
        for k, v in value.items():
            out += _non_finite_paths(v, f"{prefix}.{k}" if prefix else str(k))
        return out
    if isinstance(value, list):
        out = []
        for i, v in enumerate(value):
            out += _non_finite_paths(v, f"{prefix}.{i}" if prefix else str(i))
        return out
    return []


def _prefixed(prefix: str, path: str) -> str:
    return f"{prefix}.{path}" if prefix else path


def physics_problems(payload: Mapping[str, Any], prefix: str = "") -> list[FieldProblem]:
    """Non-finite numbers anywhere (unknown fields too), and the section-1 inputs as the model checks them."""
    own = _non_finite_paths(payload) + _unrepresentable_inputs(payload)
    problems = [(_prefixed(prefix, p), r) for p, r in own]
    if _unrepresentable_inputs(payload):
        return problems  # the model cannot take such a number at all
    try:
        model.validate_shot(payload)
    except model.ShotInputError as exc:
        seen = {p for p, _ in own}
        problems += [(_prefixed(prefix, str(p)), str(r)) for p, r in exc.problems if str(p) not in seen]
    return problems


_CHECK_CHUNK = 64  # rows per vectorised check; a failing chunk is re-checked shot by shot


def _checked_inputs(
    payloads: Sequence[Mapping[str, Any]], prefixes: Sequence[str], non_finite: Sequence[bool]
) -> tuple[dict[str, list[Any]], list[FieldProblem]]:
    """Input columns of every shot (shot table names), or the problems naming each failing field.

    The vectorised check (model.validate_columns) clears the usual all-valid case in one
    call; when it fails, chunks locate the failing shots, and those (with shots only the
    per-shot check understands) go through model.validate_shot, whose problems carry
    per-shot field paths.
    """
    single = [bad or needs_single_check(p) for p, bad in zip(payloads, non_finite)]
    if not any(single):
        try:
            return input_column_values(model.validate_columns(payload_columns(payloads))), []
        except (model.ShotInputError, OverflowError):  # OverflowError: an integer beyond float range
            pass
    suspects = [i for i, flag in enumerate(single) if flag]
    for start in range(0, len(payloads), _CHECK_CHUNK):
        rows = [i for i in range(start, min(start + _CHECK_CHUNK, len(payloads))) if not single[i]]
        if not rows:
            continue
        try:
            model.validate_columns(payload_columns([payloads[i] for i in rows]))
        except (model.ShotInputError, OverflowError):
            suspects += rows
    problems: list[FieldProblem] = []
    for i in sorted(suspects):
        problems += physics_problems(payloads[i], prefixes[i])
    if problems:
        return {}, problems
    # Every suspect passed on its own: check the whole set (a ShotInputError here still 422s).
    return input_column_values(model.validate_columns(payload_columns(payloads))), []


def _reject(count: int, problems: list[FieldProblem], batch: bool) -> ProblemError:
    metrics.SHOTS_REJECTED.inc(count, reason="invalid")
    failing = {p.split(".", 2)[1] for p, _ in problems if p.startswith("shots.")}
    if batch:
        detail = f"{len(failing) or count} of {count} shots are invalid; nothing was stored"
    else:
        detail = f"the shot is invalid ({len(problems)} problem(s)); nothing was stored"
    return invalid_input(problems, detail)


def prepare_all(payloads: Sequence[Any], batch: bool) -> PreparedBatch:
    """Validate every body; 422 naming every failing field (``shots.<i>.<path>`` in a batch)."""
    problems: list[FieldProblem] = []
    valid: dict[int, tuple[ShotEnvelope, dict[str, Any], str]] = {}
    objects: list[int] = []
    non_finite: list[bool] = []
    for i, payload in enumerate(payloads):
        prefix = f"shots.{i}" if batch else ""
        if not isinstance(payload, Mapping):
            problems.append((prefix or "body", "a shot must be a JSON object"))
            continue
        objects.append(i)
        envelope = None
        try:
            envelope = _ENVELOPE.validate_python(payload)
        except ValidationError as exc:
            problems += pydantic_problems(exc.errors(include_url=False), prefix)
        comparable = comparable_payload(payload, envelope.taken_at) if envelope else payload
        try:
            digest = payload_digest(comparable)
        except ValueError:  # NaN or infinity somewhere; physics_problems names where
            non_finite.append(True)
            continue
        non_finite.append(False)
        if envelope is not None:
            valid[i] = (envelope, comparable, digest)
    inputs, physics = _checked_inputs(
        [payloads[i] for i in objects], [f"shots.{i}" if batch else "" for i in objects], non_finite
    )
    problems += physics
    if problems:
        if batch:  # in request order
            problems.sort(key=lambda p: int(p[0].split(".", 2)[1]) if p[0].startswith("shots.") else -1)
        raise _reject(len(payloads), problems, batch)
    prepared: list[PreparedShot] = []
    for position, i in enumerate(objects):
        envelope, comparable, digest = valid[i]
        prepared.append(PreparedShot(
            index=i, payload=payloads[i], shot_id=envelope.shot_id,
            taken_at=envelope.taken_at.astimezone(timezone.utc), notes=envelope.notes,
            tags=list(envelope.tags), position=position, comparable=comparable, sha256=digest,
        ))
    return PreparedBatch(prepared, inputs)


# --- evaluation ------------------------------------------------------------------------------------


def evaluate_inputs(inputs: Mapping[str, Sequence[Any]], overrides: Mapping[str, Any], mode: str) -> dict[str, np.ndarray]:
    """model.evaluate_table over shot table input columns, timed for /metrics."""
    start = time.perf_counter()
    table = model.evaluate_table(model_columns(inputs), overrides)
    metrics.EVALUATION_SECONDS.observe(time.perf_counter() - start, mode=mode)
    metrics.EVALUATION_SHOTS.inc(len(next(iter(inputs.values()), [])), mode=mode)
    return table


def _nan_to_none(values: np.ndarray) -> list[float | None]:
    return [None if v != v or v in (math.inf, -math.inf) else v for v in np.asarray(values, dtype=float).tolist()]


def evaluation_columns(
    table: Mapping[str, np.ndarray],
    shot_pks: Sequence[int],
    campaign_id: int,
    settings_version: int,
    now: datetime,
) -> tuple[dict[str, list[Any]], dict[str, list[Any]]]:
    """Evaluation and flag table columns for the table's shots (in order)."""
    n = len(shot_pks)
    evals: dict[str, list[Any]] = {name: _nan_to_none(table[name]) for name in model.OUTPUT_NAMES}
    evals.update(
        shot_pk=list(shot_pks), campaign_id=[campaign_id] * n, model_version=[model.MODEL_VERSION] * n,
        settings_version=[settings_version] * n, evaluated_at=[now] * n,
        status=[model.STATUSES[rank] for rank in table["status"].tolist()],
    )
    flags: dict[str, list[Any]] = {k: [] for k in ("shot_pk", "campaign_id", "code", "severity", "value",
                                                   "limit_value", "message")}
    for code in model.FLAG_CODES:
        ranks = table[f"flag.{code}"]
        fired = np.flatnonzero(ranks)
        if fired.size == 0:
            continue
        values = _nan_to_none(table[f"flag_value.{code}"][fired])
        limits = _nan_to_none(table[f"flag_limit.{code}"][fired])
        for i, value, limit in zip(fired.tolist(), values, limits):
            severity = model.SEVERITY_BY_RANK[ranks[i]]
            flags["shot_pk"].append(shot_pks[i])
            flags["code"].append(code)
            flags["severity"].append(severity)
            flags["value"].append(value)
            flags["limit_value"].append(limit)
            flags["message"].append(model.flag_message(code, severity, value, limit))
    flags["campaign_id"] = [campaign_id] * len(flags["shot_pk"])
    return evals, flags


def as_rows(columns: Mapping[str, Sequence[Any]]) -> list[dict[str, Any]]:
    names = list(columns)
    return [dict(zip(names, values)) for values in zip(*columns.values())]


def evaluation_rows(
    table: Mapping[str, np.ndarray],
    shot_pks: Sequence[int],
    campaign_id: int,
    settings_version: int,
    now: datetime,
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Evaluation rows and flag rows for the table's shots (in order)."""
    evals, flags = evaluation_columns(table, shot_pks, campaign_id, settings_version, now)
    return as_rows(evals), as_rows(flags)


# --- storing -----------------------------------------------------------------------------------------


def shot_columns(batch: PreparedBatch, shots: Sequence[PreparedShot], campaign_id: int,
                 now: datetime, revision: int = 1) -> dict[str, list[Any]]:
    """Shot table columns (no id) for some shots of a batch."""
    n = len(shots)
    return {
        "campaign_id": [campaign_id] * n,
        "shot_id": [s.shot_id for s in shots],
        "taken_at": [s.taken_at for s in shots],
        "revision": [revision] * n,
        "notes": [s.notes for s in shots],
        "tags": [s.tags for s in shots],
        "raw_payload": [s.payload for s in shots],
        "payload_sha256": [s.sha256 for s in shots],
        "created_at": [now] * n,
        "updated_at": [now] * n,
        **batch.input_columns(shots),
    }


def revision_columns(pks: Sequence[int], shots: Sequence[PreparedShot], revision: int, reason: str,
                     author: str, now: datetime) -> dict[str, list[Any]]:
    n = len(shots)
    return {
        "shot_pk": list(pks),
        "revision": [revision] * n,
        "raw_payload": [s.payload for s in shots],
        "payload_sha256": [s.sha256 for s in shots],
        "reason": [reason] * n,
        "author": [author] * n,
        "created_at": [now] * n,
    }


@dataclass
class ItemOutcome:
    index: int
    shot_id: str
    outcome: str  # created | unchanged | duplicate_in_batch
    shot_pk: int | None = None
    status: str | None = None


@dataclass
class IngestResult:
    campaign: Campaign
    items: list[ItemOutcome] = field(default_factory=list)

    def count(self, outcome: str) -> int:
        return sum(1 for i in self.items if i.outcome == outcome)


def _conflict(problems: list[FieldProblem], detail: str) -> ProblemError:
    return ProblemError(409, "Shot conflict", detail, type_=SHOT_CONFLICT, errors=problems)


def _stored_comparable(payload: Mapping[str, Any]) -> dict[str, Any]:
    return comparable_payload(payload, _ENVELOPE.validate_python(payload).taken_at)


def ingest_shots(
    session: Session, campaign_slug: str, payloads: Sequence[Any], actor: str, *, batch: bool = True
) -> IngestResult:
    """Store and evaluate shots all-or-nothing, committed before returning.

    ``batch`` only changes how failing fields are named (``shots.<i>.<path>`` or ``<path>``).
    Raises ProblemError: 404 unknown campaign, 422 invalid shots, 409 conflicting payloads.
    """
    with cyclic_gc_paused():
        return _ingest(session, campaign_slug, payloads, actor, batch)


def _ingest(session: Session, campaign_slug: str, payloads: Sequence[Any], actor: str, batch: bool) -> IngestResult:
    prepared = prepare_all(payloads, batch)
    prefix = (lambda i: f"shots.{i}") if batch else (lambda i: "")

    first_by_id: dict[str, PreparedShot] = {}
    duplicates: list[PreparedShot] = []
    problems: list[FieldProblem] = []
    for shot in prepared.shots:
        first = first_by_id.setdefault(shot.shot_id, shot)
        if first is shot:
            continue
        paths = [] if first.sha256 == shot.sha256 else differing_paths(first.comparable, shot.comparable)
        if not paths:
            duplicates.append(shot)
        problems += [(_prefixed(prefix(shot.index), path), f"differs from shots.{first.index}, which has the same shot_id")
                     for path in paths]
    if problems:
        metrics.SHOTS_REJECTED.inc(len(payloads), reason="conflict")
        raise _conflict(problems, "the batch holds different payloads under one shot_id; nothing was stored")
    unique = sorted(first_by_id.values(), key=lambda s: s.shot_id)

    def work() -> IngestResult:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = get_campaign_or_404(session, campaign_slug)
        stored = shot_store.digests_by_shot_id(session, campaign.id, [s.shot_id for s in unique])
        mismatched = [s for s in unique if s.shot_id in stored and stored[s.shot_id].payload_sha256 != s.sha256]
        old = shot_store.raw_payloads(session, [stored[s.shot_id].shot_pk for s in mismatched])
        errs: list[FieldProblem] = []
        conflicts = 0
        for s in sorted(mismatched, key=lambda s: s.index):
            paths = differing_paths(_stored_comparable(old[stored[s.shot_id].shot_pk]), s.comparable)
            conflicts += bool(paths)
            errs += [(_prefixed(prefix(s.index), path), f"differs from the stored shot {s.shot_id!r}") for path in paths]
        if errs:
            raise _conflict(errs, f"{conflicts} shot id(s) are already stored with a different payload "
                                  "(correct a shot with PUT); nothing was stored")
        result = IngestResult(campaign=campaign)
        new = [s for s in unique if s.shot_id not in stored]
        if new:
            now = datetime.now(timezone.utc)
            columns = shot_columns(prepared, new, campaign.id, now)
            pks = shot_store.insert_shots(session, columns)
            shot_store.insert_revisions(session, revision_columns(pks, new, 1, "first version", actor, now))
            table = evaluate_inputs({c: columns[c] for c in prepared.inputs}, campaign.model_settings or {},
                                    "batch" if batch else "single")
            evals, flags = evaluation_columns(table, pks, campaign.id, campaign.settings_version, now)
            shot_store.insert_evaluations(session, evals)
            shot_store.insert_flags(session, flags)
            result.items += [ItemOutcome(s.index, s.shot_id, "created", pk, status)
                             for s, pk, status in zip(new, pks, evals["status"])]
            audit.record(session, actor, "shots.ingest", campaign_slug=campaign.slug,
                         target=f"{len(new)} shot(s)", detail={"created": [s.shot_id for s in new]})
        result.items += [ItemOutcome(s.index, s.shot_id, "unchanged", stored[s.shot_id].shot_pk)
                         for s in unique if s.shot_id in stored]
        result.items += [ItemOutcome(s.index, s.shot_id, "duplicate_in_batch")
                         for s in duplicates]
        return result

    try:
        result = run_write(session, work)
    except ProblemError as exc:
        if exc.status_code == 409:
            metrics.SHOTS_REJECTED.inc(len(payloads), reason="conflict")
        raise
    result.items.sort(key=lambda i: i.index)
    metrics.SHOTS_INGESTED.inc(result.count("created"))
    metrics.SHOTS_UNCHANGED.inc(result.count("unchanged") + result.count("duplicate_in_batch"))
    return result


# --- corrections ---------------------------------------------------------------------------------------


def correct_shot(
    session: Session, campaign_slug: str, shot_id: str, payload: Any, actor: str, reason: str = ""
) -> tuple[Shot, bool]:
    """Store a corrected shot as a new revision and re-evaluate it; (shot, changed).

    Earlier revisions stay in shot_revisions; an identical payload changes nothing.
    """
    prepared = prepare_all([payload], batch=False)
    [shot] = prepared.shots
    if shot.shot_id != shot_id:
        raise invalid_input([("shot_id", f"must match the shot id in the path ({shot_id!r})")])

    def work() -> tuple[Shot, bool]:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = get_campaign_or_404(session, campaign_slug)
        current = shot_store.get_shot(session, campaign.id, shot_id)
        if current is None:
            raise not_found(f"shot {shot_id!r} in campaign {campaign_slug!r}")
        changed = [] if current.payload_sha256 == shot.sha256 else differing_paths(
            _stored_comparable(current.raw_payload), shot.comparable)
        if not changed:
            return current, False
        now = datetime.now(timezone.utc)
        revision = current.revision + 1
        columns = shot_columns(prepared, [shot], campaign.id, now, revision)
        [values] = as_rows({k: v for k, v in columns.items() if k not in ("campaign_id", "shot_id", "created_at")})
        shot_store.update_shot(session, current.id, values)
        shot_store.insert_revisions(session, revision_columns([current.id], [shot], revision, reason, actor, now))
        table = evaluate_inputs(prepared.inputs, campaign.model_settings or {}, "single")
        evals, flags = evaluation_rows(table, [current.id], campaign.id, campaign.settings_version, now)
        shot_store.replace_evaluations(session, evals, flags)
        audit.record(session, actor, "shot.correct", campaign_slug=campaign.slug, target=shot_id,
                     detail={"revision": revision, "reason": reason, "changed": changed})
        session.expire(current)
        return current, True

    shot_row, changed = run_write(session, work)
    if changed:
        metrics.SHOTS_INGESTED.inc(1)
    return shot_row, changed


# --- re-evaluation after a settings change or a model upgrade -------------------------------------

REEVALUATION_CHUNK = 2000


def count_stale(session: Session, campaign_slug: str) -> int:
    """Shots of the campaign evaluated with older settings or by another model version."""
    campaign = get_campaign_or_404(session, campaign_slug)
    return shot_store.count_stale(session, campaign.id, campaign.settings_version, model.MODEL_VERSION)


def reevaluate_stale_chunk(session: Session, campaign_slug: str, chunk: int = REEVALUATION_CHUNK) -> int:
    """Re-evaluate up to ``chunk`` stale shots (see count_stale); returns how many."""

    def work() -> int:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = get_campaign_or_404(session, campaign_slug)
        pks, inputs = shot_store.stale_inputs(session, campaign.id, campaign.settings_version,
                                              model.MODEL_VERSION, chunk)
        if not pks:
            return 0
        table = evaluate_inputs(inputs, campaign.model_settings or {}, "reevaluate")
        evals, flags = evaluation_rows(table, pks, campaign.id, campaign.settings_version,
                                       datetime.now(timezone.utc))
        shot_store.replace_evaluations(session, evals, flags)
        return len(pks)

    n = run_write(session, work)
    metrics.SHOTS_REEVALUATED.inc(n)
    return n


def reevaluate_campaign(factory: sessionmaker[Session], campaign_slug: str, progress: Progress) -> int:
    """Re-evaluate every stale shot of the campaign, chunk by chunk (each its own
    transaction); returns how many. The "reevaluate" job and ``wakeledger reevaluate`` run this."""
    with factory() as session:
        total = count_stale(session, campaign_slug)
    progress(0, total, f"re-evaluating {total} shots")
    done = 0
    while True:
        with factory() as session:
            n = reevaluate_stale_chunk(session, campaign_slug)
        if n == 0:
            return done
        done += n
        total = max(total, done)
        progress(done, total, f"re-evaluated {done} of {total} shots")
