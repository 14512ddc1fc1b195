"""Background job rows: state, progress, leases and checkpoints, persisted so that any
process (app servers, workers on other hosts) reads and claims them.

A worker claims a job by taking its lease in one write transaction: on PostgreSQL the
candidate row is locked with ``FOR UPDATE SKIP LOCKED`` (two workers never wait on or
take the same row); on SQLite the caller holds the database write lock
(``BEGIN IMMEDIATE``), which serialises claims.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import func, or_, select, update
from sqlalchemy.orm import Session

from app.tables import Job

UNFINISHED = ("queued", "running")


def add_job(session: Session, job: Job) -> Job:
    session.add(job)
    session.flush()
    return job


def get_job(session: Session, job_id: str) -> Job | None:
    return session.get(Job, job_id)


def has_unfinished_job(session: Session, kind: str, campaign_id: int) -> bool:
    """Whether a job of this kind is queued or running for the campaign."""
    return unfinished_job(session, kind, campaign_id) is not None


def unfinished_job(session: Session, kind: str, campaign_id: int) -> Job | None:
    """The oldest queued or running job of this kind for the campaign."""
    return session.scalar(
        select(Job)
        .where(
            Job.kind == kind,
            Job.campaign_id == campaign_id,
            Job.state.in_(UNFINISHED),
            Job.cancel_requested_at.is_(None),
        )
        .order_by(Job.created_at)
        .limit(1)
    )


def count_unfinished(
    session: Session,
    *,
    campaign_id: int | None = None,
    token_id: int | None = None,
    except_kinds: Sequence[str] = (),
) -> int:
    """Queued or running jobs of a campaign, or submitted by a token (not counting ``except_kinds``)."""
    stmt = select(func.count()).select_from(Job).where(Job.state.in_(UNFINISHED), Job.cancel_requested_at.is_(None))
    if except_kinds:
        stmt = stmt.where(Job.kind.not_in(list(except_kinds)))
    if campaign_id is not None:
        stmt = stmt.where(Job.campaign_id == campaign_id)
    if token_id is not None:
        stmt = stmt.where(Job.submitter_token_id == token_id)
    return session.scalar(stmt) or 0


def recent_jobs(session: Session, limit: int = 50) -> list[Job]:
    """Unfinished jobs first (oldest first), then the latest finished ones."""
    unfinished = list(session.scalars(select(Job).where(Job.state.in_(UNFINISHED)).order_by(Job.created_at)))
    finished = list(
        session.scalars(select(Job).where(Job.state.not_in(UNFINISHED)).order_by(Job.finished_at.desc()).limit(limit))
    )
    return unfinished + finished


def set_job(session: Session, job_id: str, **values: Any) -> None:
    session.execute(update(Job).where(Job.id == job_id).values(**values))


def _claimable(now: datetime, kinds: Sequence[str]):
    waited = or_(Job.not_before.is_(None), Job.not_before <= now)  # a retry's backoff is over
    return (
        or_((Job.state == "queued") & waited, (Job.state == "running") & (Job.lease_expires_at < now)),
        Job.kind.in_(list(kinds)),
    )


def anything_to_claim(session: Session, now: datetime, kinds: Sequence[str]) -> bool:
    """A read-only look (no write lock): is a job claimable, or a cancelled one abandoned?"""
    return session.scalar(select(Job.id).where(*_claimable(now, kinds)).limit(1)) is not None


def claim_next(session: Session, owner: str, now: datetime, lease_until: datetime, kinds: Sequence[str]) -> Job | None:
    """Take the lease of the oldest claimable job: queued (and past its ``not_before``), or
    running with a lapsed lease (its worker died), not asked to cancel, of a kind this worker
    knows. Caller commits."""
    candidate = session.scalar(
        select(Job)
        .where(*_claimable(now, kinds), Job.cancel_requested_at.is_(None))
        .order_by(Job.created_at)
        .limit(1)
        .with_for_update(skip_locked=True)
    )
    if candidate is None:
        return None
    session.execute(
        update(Job)
        .where(Job.id == candidate.id)
        .values(
            state="running",
            lease_owner=owner,
            lease_expires_at=lease_until,
            heartbeat_at=now,
            attempts=Job.attempts + 1,
            started_at=func.coalesce(Job.started_at, now),
        )
    )
    session.refresh(candidate)
    return candidate


def renew_lease(session: Session, job_id: str, owner: str, now: datetime, lease_until: datetime) -> bool:
    """Extend the lease if this owner still holds it; False when it was lost (taken over, or the job ended)."""
    result = session.execute(
        update(Job)
        .where(Job.id == job_id, Job.lease_owner == owner, Job.state == "running")
        .values(lease_expires_at=lease_until, heartbeat_at=now)
    )
    return bool(result.rowcount)  # type: ignore[attr-defined]


def cancel_requested(session: Session, job_id: str) -> bool:
    return session.scalar(select(Job.cancel_requested_at).where(Job.id == job_id)) is not None


def update_owned(session: Session, job_id: str, owner: str, **values: Any) -> bool:
    """Write job fields only while ``owner`` holds the lease; False when it does not."""
    result = session.execute(
        update(Job).where(Job.id == job_id, Job.lease_owner == owner, Job.state == "running").values(**values)
    )
    return bool(result.rowcount)  # type: ignore[attr-defined]


def end_abandoned_cancellations(session: Session, now: datetime) -> int:
    """Running jobs asked to cancel whose worker is gone (lapsed lease) are cancelled."""
    result = session.execute(
        update(Job)
        .where(Job.state == "running", Job.cancel_requested_at.is_not(None), Job.lease_expires_at < now)
        .values(state="cancelled", finished_at=now, lease_owner=None, message="cancelled")
    )
    return int(result.rowcount)  # type: ignore[attr-defined]


def now() -> datetime:
    return datetime.now(UTC)
