"""Reading shots: the JSON shape of a stored shot, filtered pages and revisions."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from sqlalchemy.orm import Session

import model
from app.problems import invalid_input, not_found
from app.services.campaigns import get_campaign_or_404
from app.services.ingest import format_utc, physics_problems
from app.store import shots as shot_store
from app.tables import Evaluation, Flag, Shot, ShotRevision


def flag_out(flag: Flag) -> dict[str, Any]:
    return {"code": flag.code, "severity": flag.severity, "value": flag.value, "limit": flag.limit,
            "message": flag.message}


def evaluation_out(evaluation: Evaluation | None, flags: Sequence[Flag]) -> dict[str, Any] | None:
    """Every output name (None where null), status, flags, and the versions used."""
    if evaluation is None:
        return None
    out: dict[str, Any] = {name: getattr(evaluation, name) for name in model.OUTPUT_NAMES}
    out.update(
        status=evaluation.status,
        flags=[flag_out(f) for f in flags],
        model_version=evaluation.model_version,
        settings_version=evaluation.settings_version,
        evaluated_at=format_utc(evaluation.evaluated_at),
    )
    return out


def shot_out(shot: Shot, evaluation: Evaluation | None, flags: Sequence[Flag]) -> dict[str, Any]:
    return {
        "shot_id": shot.shot_id,
        "taken_at": format_utc(shot.taken_at),
        "revision": shot.revision,
        "notes": shot.notes,
        "tags": shot.tags,
        "payload": shot.raw_payload,
        "created_at": format_utc(shot.created_at),
        "updated_at": format_utc(shot.updated_at),
        "evaluation": evaluation_out(evaluation, flags),
    }


def shot_detail(session: Session, campaign_slug: str, shot_id: str) -> dict[str, Any]:
    campaign = get_campaign_or_404(session, campaign_slug)
    shot = shot_store.get_shot(session, campaign.id, shot_id)
    if shot is None:
        raise not_found(f"shot {shot_id!r} in campaign {campaign_slug!r}")
    evaluation = shot_store.get_evaluation(session, shot.id)
    return shot_out(shot, evaluation, shot_store.flags_for(session, [shot.id])[shot.id])


def shot_details_by_pk(session: Session, shot_pks: Sequence[int]) -> dict[int, dict[str, Any]]:
    out = {}
    flags = shot_store.flags_for(session, list(shot_pks))
    for pk in shot_pks:
        shot = session.get(Shot, pk)
        out[pk] = shot_out(shot, shot_store.get_evaluation(session, pk), flags[pk])
    return out


def shot_page(
    session: Session, campaign_slug: str, f: shot_store.ShotFilter, cursor: str | None, limit: int
) -> dict[str, Any]:
    campaign = get_campaign_or_404(session, campaign_slug)
    after = None
    if cursor:
        try:
            at, pk, descending = shot_store.decode_cursor(cursor)
        except (ValueError, TypeError, KeyError):
            raise invalid_input([("cursor", "not a cursor issued by this API")]) from None
        if descending != f.descending:
            raise invalid_input([("cursor", "was issued for the other sort order")])
        after = (at, pk)
    rows, last = shot_store.list_shots(session, campaign.id, f, after, limit)
    flags = shot_store.flags_for(session, [s.id for s, _ in rows])
    return {
        "items": [shot_out(s, e, flags[s.id]) for s, e in rows],
        "next_cursor": None if last is None else shot_store.encode_cursor(last[0], last[1], f.descending),
    }


def revision_out(rev: ShotRevision) -> dict[str, Any]:
    return {"revision": rev.revision, "payload": rev.raw_payload, "reason": rev.reason, "author": rev.author,
            "created_at": format_utc(rev.created_at)}


def revision_list(session: Session, campaign_slug: str, shot_id: str) -> list[dict[str, Any]]:
    campaign = get_campaign_or_404(session, campaign_slug)
    shot = shot_store.get_shot(session, campaign.id, shot_id)
    if shot is None:
        raise not_found(f"shot {shot_id!r} in campaign {campaign_slug!r}")
    return [revision_out(r) for r in shot_store.revisions_of(session, shot.id)]


def _json_value(value: Any) -> Any:
    """numpy scalars to Python, NaN to null."""
    if isinstance(value, Mapping):
        return {k: _json_value(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_value(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def what_if(payload: Any, settings: Mapping[str, Any] | None, settings_version: int | None) -> dict[str, Any]:
    """Evaluate a shot body with nothing stored; the same input checks as ingest."""
    if not isinstance(payload, Mapping):
        raise invalid_input([("body", "a shot must be a JSON object")])
    problems = physics_problems(payload)
    if problems:
        raise invalid_input(problems)
    result = _json_value(model.evaluate_shot(payload, settings))
    result.update(model_version=model.MODEL_VERSION, settings_version=settings_version)
    return result
