"""Excluding a shot (a test shot, a shot posted in the wrong units) and restoring it.

An excluded shot is kept, shown and marked, and left out of every count, chart and
summary (the one filter: ``app.store.exclusions.counted``). Excluding is not a revision
of the shot's conditions (revisions stay for corrections) but is audited
(``shot.exclude`` / ``shot.restore``). Re-evaluation still evaluates excluded shots, so
a restored shot comes back with a current evaluation.

Replays: excluding a shot that is excluded with the same reason changes nothing (and the
answer says so); with another reason it is a Conflict (restore it first). Restoring a
shot that is not excluded changes nothing.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.orm import Session

from app.database import begin_write, run_write
from app.errors import Conflict, InvalidInput, NotFound
from app.services import metrics
from app.services.campaigns import campaign_lock, require_campaign
from app.store import audit
from app.store import exclusions as exclusion_store
from app.store import shots as shot_store
from app.store.exclusions import EXCLUDED_MODES, ExcludedMode

# The listing modes, re-exported for the routers (which do not import the store).
__all__ = [
    "EXCLUDED_MODES",
    "MAX_REASON_CHARS",
    "ExcludedMode",
    "ExclusionOutcome",
    "exclude_shot",
    "excluded_mode",
    "exclusion_reason",
    "exclusion_state",
    "restore_shot",
]
from app.tables import Shot
from app.times import format_utc

MAX_REASON_CHARS = 500


def exclusion_reason(text: Any) -> str:
    """The reason as stored: trimmed, non-empty, at most MAX_REASON_CHARS characters, no
    control characters but tabs; InvalidInput naming ``reason`` otherwise."""
    if not isinstance(text, str):
        raise InvalidInput([("reason", "must be text")])
    reason = text.strip()
    if not reason:
        raise InvalidInput([("reason", "say why the shot is excluded (the reason must not be empty)")])
    if len(reason) > MAX_REASON_CHARS:
        raise InvalidInput([("reason", f"at most {MAX_REASON_CHARS} characters, got {len(reason)}")])
    if any(ord(c) < 32 and c != "\t" or ord(c) == 127 for c in reason):
        raise InvalidInput([("reason", "must not contain control characters (line breaks included)")])
    return reason


def excluded_mode(value: str | None, field: str = "excluded") -> str:
    """A listing's ``excluded`` parameter: omit (the default), include or only."""
    if value is None or value == "":
        return "omit"
    if value not in EXCLUDED_MODES:
        raise InvalidInput([(field, f"choose one of {', '.join(EXCLUDED_MODES)}")])
    return value


def exclusion_state(shot: Shot) -> dict[str, Any]:
    """The exclusion fields of a shot as the API shows them."""
    return {
        "excluded": shot.excluded_at is not None,
        "excluded_at": format_utc(shot.excluded_at) if shot.excluded_at is not None else None,
        "excluded_reason": shot.excluded_reason,
        "excluded_by": shot.excluded_by,
    }


@dataclass(frozen=True)
class ExclusionOutcome:
    state: dict[str, Any]  # shot_id and exclusion_state
    changed: bool


def _answer(shot: Shot, changed: bool) -> ExclusionOutcome:
    return ExclusionOutcome({"shot_id": shot.shot_id, **exclusion_state(shot)}, changed)


def _change(session: Session, campaign_slug: str, shot_id: str, actor: str, reason: str | None) -> ExclusionOutcome:
    """Exclude (``reason`` given) or restore (None) one shot, committed and audited."""

    def work() -> ExclusionOutcome:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = require_campaign(session, campaign_slug)
        shot = shot_store.get_shot(session, campaign.id, shot_id)
        if shot is None:
            raise NotFound(f"shot {shot_id!r} in campaign {campaign_slug!r}")
        if reason is None and shot.excluded_at is None:
            return _answer(shot, False)
        if reason is not None and shot.excluded_at is not None:
            if shot.excluded_reason == reason:
                return _answer(shot, False)
            raise Conflict(
                f"shot {shot_id!r} is already excluded, for another reason; restore it first to change the reason",
                [("reason", f"the shot is excluded because: {shot.excluded_reason}")],
            )
        now = datetime.now(UTC)
        if reason is None:
            was = {"was_excluded_because": shot.excluded_reason, "was_excluded_by": shot.excluded_by}
            exclusion_store.set_exclusion(session, shot.id, None, None, None)
            audit.record(session, actor, "shot.restore", campaign_slug=campaign.slug, target=shot_id, detail=was)
        else:
            exclusion_store.set_exclusion(session, shot.id, now, reason, actor)
            audit.record(
                session, actor, "shot.exclude", campaign_slug=campaign.slug, target=shot_id, detail={"reason": reason}
            )
        session.expire(shot)
        return _answer(shot, True)

    outcome = run_write(session, work)
    if outcome.changed:
        metrics.SHOT_EXCLUSIONS.inc(action="exclude" if reason is not None else "restore")
    return outcome


def exclude_shot(session: Session, campaign_slug: str, shot_id: str, reason: Any, actor: str) -> ExclusionOutcome:
    """Exclude a shot from counts, charts and summaries, with a reason (see the module's replay rules)."""
    return _change(session, campaign_slug, shot_id, actor, exclusion_reason(reason))


def restore_shot(session: Session, campaign_slug: str, shot_id: str, actor: str) -> ExclusionOutcome:
    """Count an excluded shot again (a shot that is not excluded stays as it is)."""
    return _change(session, campaign_slug, shot_id, actor, None)
