"""Storing shots: de-duplicate, evaluate (one vectorised call) and write, in one transaction.

``ingest_shots`` is the single entry point for the API (one shot or a batch) and for
the demo loader. Nothing is half-written: the whole call commits or nothing does.

Replay rules: a shot id already stored with an identical payload is ``unchanged``
(nothing is written); with a different payload the whole call is refused (ShotConflict)
and the differing fields are named. Identical duplicates inside one batch are stored
once (``duplicate_in_batch``); differing duplicates refuse the batch. "Identical"
compares numbers by value (250 == 250.0) and taken_at as an instant.
"""

from __future__ import annotations

import gc
import threading
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

import model
from app.database import begin_write, checkpoint_wal, defer_wal_checkpoint, run_write
from app.errors import FieldProblem, InvalidInput, NotFound, ShotConflict
from app.plain import float_list
from app.services import alerts, metrics
from app.services.campaigns import campaign_lock, require_campaign
from app.services.ingest.evaluation import as_rows, evaluate_inputs, evaluation_columns
from app.services.ingest.payloads import (
    DEFAULT_MAX_FUTURE,
    PreparedBatch,
    PreparedShot,
    differing_paths,
    prefixed,
    prepare_all,
    same_digest,
    stored_comparable,
)
from app.store import audit
from app.store import shots as shot_store
from app.tables import Campaign, Shot

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


# --- the store boundary: dotted model columns become shot table columns ---------------------------


def stored_input_columns(inputs: Mapping[str, np.ndarray]) -> dict[str, list[Any]]:
    """Shot table input columns (``model.column_name``) from validated model columns
    (NaN -> None, integers as int)."""
    out: dict[str, list[Any]] = {}
    for f in model.INPUT_FIELDS:
        values = inputs[f.path]
        name = model.column_name(f.path)
        if f.kind == "enum":
            out[name] = [str(v) for v in values.tolist()]
        elif f.kind == "integer":
            out[name] = [None if v is None else int(v) for v in float_list(values)]
        else:
            out[name] = float_list(values)
    return out


def shot_columns(
    batch: PreparedBatch, shots: Sequence[PreparedShot], campaign_id: int, now: datetime, revision: int = 1
) -> dict[str, list[Any]]:
    """Shot table columns (no id) for some shots of a batch."""
    n = len(shots)
    return {
        "campaign_id": [campaign_id] * n,
        "shot_id": [s.shot_id for s in shots],
        "taken_at": [s.taken_at for s in shots],
        "revision": [revision] * n,
        "notes": [s.notes for s in shots],
        "tags": [s.tags for s in shots],
        "raw_payload": stored_payloads(shots),
        "payload_sha256": [s.sha256 for s in shots],
        "created_at": [now] * n,
        "updated_at": [now] * n,
        **stored_input_columns(batch.inputs_of(shots)),
    }


def stored_payloads(shots: Sequence[PreparedShot]) -> list[Any]:
    """raw_payload cells: the canonical JSON text made for the digest, stored as it is (one serialisation)."""
    if all(s.text for s in shots):
        return shot_store.SerialisedJson(s.text for s in shots)
    return [s.payload for s in shots]


def revision_columns(
    pks: Sequence[int], shots: Sequence[PreparedShot], revision: int, reason: str, author: str, now: datetime
) -> dict[str, list[Any]]:
    n = len(shots)
    return {
        "shot_pk": list(pks),
        "revision": [revision] * n,
        "raw_payload": stored_payloads(shots),
        "payload_sha256": [s.sha256 for s in shots],
        "reason": [reason] * n,
        "author": [author] * n,
        "created_at": [now] * n,
    }


# --- ingest ---------------------------------------------------------------------------------------


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


def ingest_shots(
    session: Session,
    campaign_slug: str,
    payloads: Sequence[Any],
    actor: str,
    *,
    batch: bool = True,
    max_future: timedelta = DEFAULT_MAX_FUTURE,
    alert_policy: alerts.AlertPolicy | None = None,
    defer_checkpoint: bool = False,
) -> IngestResult:
    """Store and evaluate shots all-or-nothing, committed before returning.

    ``batch`` only changes how failing fields are named (``shots.<i>.<path>`` or ``<path>``);
    with ``defer_checkpoint`` (the API's batches) the caller runs ``write_back_wal`` once it has
    answered (app.database.defer_wal_checkpoint);
    ``max_future`` is how far past the server's clock a ``taken_at`` may lie; with an
    ``alert_policy`` (the API's requests), new shots matching the campaign's alert targets
    queue their deliveries in the same transaction (backlog imports and the demo pass none).
    Raises NotFound (campaign), InvalidInput (invalid shots), ShotConflict (conflicting payloads).
    """
    with cyclic_gc_paused():
        return _ingest(session, campaign_slug, payloads, actor, batch, max_future, alert_policy, defer_checkpoint)


def _ingest(
    session: Session,
    campaign_slug: str,
    payloads: Sequence[Any],
    actor: str,
    batch: bool,
    max_future: timedelta,
    alert_policy: alerts.AlertPolicy | None,
    defer_checkpoint: bool,
) -> IngestResult:
    prepared = prepare_all(payloads, batch, max_future=max_future)

    def prefix(i: int) -> str:
        return f"shots.{i}" if batch else ""

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
        problems += [
            (prefixed(prefix(shot.index), path), f"differs from shots.{first.index}, which has the same shot_id")
            for path in paths
        ]
    if problems:
        metrics.SHOTS_REJECTED.inc(len(payloads), reason="conflict")
        raise ShotConflict("the batch holds different payloads under one shot_id; nothing was stored", problems)
    unique = sorted(first_by_id.values(), key=lambda s: s.shot_id)

    def work() -> IngestResult:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = require_campaign(session, campaign_slug)
        stored = shot_store.digests_by_shot_id(session, campaign.id, [s.shot_id for s in unique])
        mismatched = [s for s in unique if s.shot_id in stored and not same_digest(stored[s.shot_id].payload_sha256, s)]
        old = shot_store.raw_payloads(session, [stored[s.shot_id].shot_pk for s in mismatched])
        errs: list[FieldProblem] = []
        conflicts = 0
        for s in sorted(mismatched, key=lambda s: s.index):
            paths = differing_paths(stored_comparable(old[stored[s.shot_id].shot_pk]), s.comparable)
            conflicts += bool(paths)
            errs += [(prefixed(prefix(s.index), path), f"differs from the stored shot {s.shot_id!r}") for path in paths]
        if errs:
            raise ShotConflict(
                f"{conflicts} shot id(s) are already stored with a different payload "
                "(correct a shot with PUT); nothing was stored",
                errs,
            )
        result = IngestResult(campaign=campaign)
        new = [s for s in unique if s.shot_id not in stored]
        if new:
            if defer_checkpoint:
                defer_wal_checkpoint(session)
            now = datetime.now(UTC)
            pks = shot_store.insert_shots(session, shot_columns(prepared, new, campaign.id, now))
            shot_store.insert_revisions(session, revision_columns(pks, new, 1, "first version", actor, now))
            table = evaluate_inputs(
                prepared.inputs_of(new), campaign.model_settings or {}, "batch" if batch else "single"
            )
            evals, flags = evaluation_columns(
                table, pks, campaign.id, campaign.settings_version, now, [s.defaulted for s in new]
            )
            shot_store.insert_evaluations(session, evals)
            shot_store.insert_flags(session, flags)
            if alert_policy is not None and (targets := alerts.campaign_targets(session, campaign.id)):
                shots = alerts.shots_from_columns(
                    [s.shot_id for s in new], [1] * len(new), [s.taken_at for s in new], pks, evals["status"], flags
                )
                alerts.queue_alerts(session, campaign, targets, shots, "shot.stored", alert_policy)
            result.items += [
                ItemOutcome(s.index, s.shot_id, "created", pk, status)
                for s, pk, status in zip(new, pks, evals["status"], strict=True)
            ]
            audit.record(
                session,
                actor,
                "shots.ingest",
                campaign_slug=campaign.slug,
                target=f"{len(new)} shot(s)",
                detail={"created": [s.shot_id for s in new]},
            )
        result.items += [
            ItemOutcome(s.index, s.shot_id, "unchanged", stored[s.shot_id].shot_pk)
            for s in unique
            if s.shot_id in stored
        ]
        result.items += [ItemOutcome(s.index, s.shot_id, "duplicate_in_batch") for s in duplicates]
        return result

    try:
        result = run_write(session, work)
    except ShotConflict:
        metrics.SHOTS_REJECTED.inc(len(payloads), reason="conflict")
        raise
    result.items.sort(key=lambda i: i.index)
    metrics.SHOTS_INGESTED.inc(result.count("created"))
    metrics.SHOTS_UNCHANGED.inc(result.count("unchanged") + result.count("duplicate_in_batch"))
    return result


def write_back_wal(session: Session) -> None:
    """After answering a batch stored with ``defer_checkpoint``: the WAL checkpoint its commit left."""
    checkpoint_wal(session.get_bind().engine)


# --- corrections ---------------------------------------------------------------------------------------


def correct_shot(
    session: Session,
    campaign_slug: str,
    shot_id: str,
    payload: Any,
    actor: str,
    reason: str = "",
    *,
    max_future: timedelta = DEFAULT_MAX_FUTURE,
    alert_policy: alerts.AlertPolicy | None = None,
) -> tuple[Shot, bool]:
    """Store a corrected shot as a new revision and re-evaluate it; (shot, changed).

    Earlier revisions stay in shot_revisions; an identical payload changes nothing. With an
    ``alert_policy``, a new revision matching an alert target queues its delivery (event
    ``shot.corrected``) in the same transaction.
    """
    prepared = prepare_all([payload], batch=False, max_future=max_future)
    [shot] = prepared.shots
    if shot.shot_id != shot_id:
        raise InvalidInput([("shot_id", f"must match the shot id in the path ({shot_id!r})")])

    def work() -> tuple[Shot, bool]:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = require_campaign(session, campaign_slug)
        current = shot_store.get_shot(session, campaign.id, shot_id)
        if current is None:
            raise NotFound(f"shot {shot_id!r} in campaign {campaign_slug!r}")
        changed = (
            []
            if same_digest(current.payload_sha256, shot)
            else differing_paths(stored_comparable(current.raw_payload), shot.comparable)
        )
        if not changed:
            return current, False
        now = datetime.now(UTC)
        revision = current.revision + 1
        columns = shot_columns(prepared, [shot], campaign.id, now, revision)
        [values] = as_rows({k: v for k, v in columns.items() if k not in ("campaign_id", "shot_id", "created_at")})
        values["raw_payload"] = shot.payload  # an ORM update serialises it itself
        shot_store.update_shot(session, current.id, values)
        shot_store.insert_revisions(session, revision_columns([current.id], [shot], revision, reason, actor, now))
        table = evaluate_inputs(prepared.inputs, campaign.model_settings or {}, "single")
        eval_columns, flag_columns = evaluation_columns(
            table, [current.id], campaign.id, campaign.settings_version, now, [shot.defaulted]
        )
        shot_store.replace_evaluations(session, as_rows(eval_columns), as_rows(flag_columns))
        if alert_policy is not None and (targets := alerts.campaign_targets(session, campaign.id)):
            shots = alerts.shots_from_columns(
                [shot_id], [revision], [shot.taken_at], [current.id], eval_columns["status"], flag_columns
            )
            alerts.queue_alerts(session, campaign, targets, shots, "shot.corrected", alert_policy)
        audit.record(
            session,
            actor,
            "shot.correct",
            campaign_slug=campaign.slug,
            target=shot_id,
            detail={"revision": revision, "reason": reason, "changed": changed},
        )
        session.expire(current)
        return current, True

    shot_row, changed = run_write(session, work)
    if changed:
        metrics.SHOTS_INGESTED.inc(1)
    return shot_row, changed
