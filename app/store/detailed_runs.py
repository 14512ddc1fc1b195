"""Detailed solver runs (rows of detailed_runs) and the shot revision a run reads."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, defer

from app.tables import DetailedRun, Job, ShotRevision


def add_run(session: Session, run: DetailedRun) -> DetailedRun:
    session.add(run)
    session.flush()
    return run


def list_runs(session: Session, shot_pk: int) -> list[DetailedRun]:
    """Newest first, without the (large) result column."""
    stmt = (
        select(DetailedRun)
        .options(defer(DetailedRun.result))
        .where(DetailedRun.shot_pk == shot_pk)
        .order_by(DetailedRun.id.desc())
    )
    return list(session.scalars(stmt))


def get_run(session: Session, shot_pk: int, run_id: int) -> DetailedRun | None:
    return session.scalar(select(DetailedRun).where(DetailedRun.shot_pk == shot_pk, DetailedRun.id == run_id))


def latest_run(session: Session, shot_pk: int) -> DetailedRun | None:
    return session.scalar(
        select(DetailedRun).where(DetailedRun.shot_pk == shot_pk).order_by(DetailedRun.id.desc()).limit(1)
    )


def run_id_for_job(session: Session, job_id: str) -> int | None:
    return session.scalar(select(DetailedRun.id).where(DetailedRun.job_id == job_id))


def revision_payload(session: Session, shot_pk: int, revision: int) -> dict[str, Any] | None:
    return session.scalar(
        select(ShotRevision.raw_payload).where(ShotRevision.shot_pk == shot_pk, ShotRevision.revision == revision)
    )


def unfinished_jobs(session: Session, kind: str, campaign_id: int) -> list[Job]:
    """Queued or running jobs of one kind in a campaign, oldest first (their params say which shot)."""
    stmt = (
        select(Job)
        .where(
            Job.kind == kind,
            Job.campaign_id == campaign_id,
            Job.state.in_(("queued", "running")),
            Job.cancel_requested_at.is_(None),
        )
        .order_by(Job.created_at)
    )
    return list(session.scalars(stmt))
