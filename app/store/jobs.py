"""Background job rows: state and progress, persisted so a reader in any process sees them."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from app.tables import Job


def add_job(session: Session, job: Job) -> Job:
    session.add(job)
    session.flush()
    return job


def get_job(session: Session, job_id: str) -> Job | None:
    return session.get(Job, job_id)


def unfinished_job_ids(session: Session) -> list[str]:
    return list(session.scalars(select(Job.id).where(Job.state.in_(("queued", "running"))).order_by(Job.created_at)))


def has_unfinished_job(session: Session, kind: str, campaign_id: int) -> bool:
    """Whether a job of this kind is queued or running for the campaign."""
    return (
        session.scalar(
            select(Job.id)
            .where(Job.kind == kind, Job.campaign_id == campaign_id, Job.state.in_(("queued", "running")))
            .limit(1)
        )
        is not None
    )


def set_job(session: Session, job_id: str, **values: Any) -> None:
    session.execute(update(Job).where(Job.id == job_id).values(**values))


def now() -> datetime:
    return datetime.now(UTC)
