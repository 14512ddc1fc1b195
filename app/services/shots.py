"""Reading shots over the API: the JSON shape of a stored shot, filtered pages with a
cursor, revisions, and the what-if evaluation of a body (nothing stored)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput, NotFound
from app.plain import plain
from app.services.campaigns import effective_settings, require_campaign
from app.services.exclusions import excluded_mode, exclusion_state
from app.services.ingest import check_shot_body
from app.store import shots as shot_store
from app.tables import Evaluation, Flag, Shot, ShotRevision
from app.times import format_utc


def flag_out(flag: Flag) -> dict[str, Any]:
    return {
        "code": flag.code,
        "severity": flag.severity,
        "value": flag.value,
        "limit": flag.limit,
        "message": flag.message,
    }


def evaluation_out(evaluation: Evaluation | None, flags: Sequence[Flag]) -> dict[str, Any] | None:
    """Every output name (None where null), status, flags, and the versions used."""
    if evaluation is None:
        return None
    out: dict[str, Any] = {name: getattr(evaluation, name) for name in model.OUTPUT_NAMES}
    out.update(
        status=evaluation.status,
        flags=[flag_out(f) for f in flags],
        defaulted_fields=list(evaluation.defaulted_fields or []),
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
        **exclusion_state(shot),
        "evaluation": evaluation_out(evaluation, flags),
    }


def _shot(session: Session, campaign_slug: str, shot_id: str) -> Shot:
    campaign = require_campaign(session, campaign_slug)
    shot = shot_store.get_shot(session, campaign.id, shot_id)
    if shot is None:
        raise NotFound(f"shot {shot_id!r} in campaign {campaign_slug!r}")
    return shot


def shot_detail(session: Session, campaign_slug: str, shot_id: str) -> dict[str, Any]:
    shot = _shot(session, campaign_slug, shot_id)
    evaluation = shot_store.get_evaluation(session, shot.id)
    return shot_out(shot, evaluation, shot_store.flags_for(session, [shot.id])[shot.id])


def shot_details_by_pk(session: Session, shot_pks: Sequence[int]) -> dict[int, dict[str, Any]]:
    out = {}
    flags = shot_store.flags_for(session, list(shot_pks))
    for pk in shot_pks:
        shot = session.get(Shot, pk)
        assert shot is not None
        out[pk] = shot_out(shot, shot_store.get_evaluation(session, pk), flags[pk])
    return out


def shot_page(
    session: Session,
    campaign_slug: str,
    *,
    status: Sequence[str] = (),
    flag: Sequence[str] = (),
    taken_from: datetime | None = None,
    taken_to: datetime | None = None,
    seed_method: Sequence[str] = (),
    descending: bool = False,
    excluded: str | None = None,
    cursor: str | None = None,
    limit: int = 100,
) -> dict[str, Any]:
    """One page of shots in (taken_at, id) order, excluded shots left out unless ``excluded``
    is include or only; unknown statuses or flag codes are refused."""
    mode = excluded_mode(excluded)
    problems = [("status", f"unknown status {s!r}") for s in status if s not in model.STATUSES]
    problems += [("flag", f"unknown flag code {c!r}") for c in flag if c not in model.FLAG_CODES]
    if problems:
        raise InvalidInput(problems)
    f = shot_store.ShotFilter(
        status=tuple(status),
        flag_code=tuple(flag),
        taken_from=taken_from,
        taken_to=taken_to,
        seed_method=tuple(seed_method),
        descending=descending,
        excluded=mode,
    )
    campaign = require_campaign(session, campaign_slug)
    after = None
    if cursor:
        try:
            at, pk, cursor_descending = shot_store.decode_cursor(cursor)
        except (ValueError, TypeError, KeyError):
            raise InvalidInput([("cursor", "not a cursor issued by this API")]) from None
        if cursor_descending != f.descending:
            raise InvalidInput([("cursor", "was issued for the other sort order")])
        after = (at, pk)
    rows, last = shot_store.list_shots(session, campaign.id, f, after, limit)
    flags = shot_store.flags_for(session, [s.id for s, _ in rows])
    return {
        "items": [shot_out(s, e, flags[s.id]) for s, e in rows],
        "next_cursor": None if last is None else shot_store.encode_cursor(last[0], last[1], f.descending),
    }


def revision_out(rev: ShotRevision) -> dict[str, Any]:
    return {
        "revision": rev.revision,
        "payload": rev.raw_payload,
        "reason": rev.reason,
        "author": rev.author,
        "created_at": format_utc(rev.created_at),
    }


def revision_list(session: Session, campaign_slug: str, shot_id: str) -> list[dict[str, Any]]:
    shot = _shot(session, campaign_slug, shot_id)
    return [revision_out(r) for r in shot_store.revisions_of(session, shot.id)]


def what_if(session: Session, payload: Any, campaign_slug: str | None = None) -> dict[str, Any]:
    """Evaluate a shot body with nothing stored (the campaign's settings if one is named);
    the same input checks as ingest."""
    settings: Mapping[str, Any] | None = None
    version = None
    if campaign_slug is not None:
        campaign = require_campaign(session, campaign_slug)
        settings, version = effective_settings(campaign), campaign.settings_version
    check_shot_body(payload)
    return evaluation_answer(payload, settings, version)


def evaluation_answer(
    payload: Mapping[str, Any], settings: Mapping[str, Any] | None, settings_version: int | None
) -> dict[str, Any]:
    """``POST /evaluate``'s answer for a valid shot body: ``model.evaluate_shot`` (NaN as null) and the versions."""
    result = plain(model.evaluate_shot(payload, settings))
    result.update(model_version=model.MODEL_VERSION, settings_version=settings_version)
    return result
