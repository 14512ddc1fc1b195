"""Background jobs in threads, with progress persisted in the jobs table.

A job kind is a function ``run(factory, job_id, progress) -> result dict`` registered in
``JOB_KINDS``. Jobs left queued or running by a stopped process are resumed at start-up
(every kind must therefore be safe to restart).
"""

from __future__ import annotations

import logging
import threading
import uuid
from collections.abc import Callable
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from app.database import begin_write
from app.schemas import JobOut
from app.store import jobs as job_store
from app.tables import Job

log = logging.getLogger(__name__)

Progress = Callable[[int, int, str], None]  # (done, total, message)
JobRun = Callable[[sessionmaker[Session], str, Progress], dict[str, Any]]
JOB_KINDS: dict[str, JobRun] = {}


def job_kind(name: str) -> Callable[[JobRun], JobRun]:
    def register(fn: JobRun) -> JobRun:
        JOB_KINDS[name] = fn
        return fn

    return register


def new_job(session: Session, kind: str, campaign_id: int | None, params: dict[str, Any] | None = None) -> Job:
    """A queued job row (committed by the caller's transaction; start it afterwards)."""
    if kind not in JOB_KINDS:
        raise ValueError(f"unknown job kind {kind!r}")
    return job_store.add_job(
        session,
        Job(
            id=str(uuid.uuid4()),
            kind=kind,
            campaign_id=campaign_id,
            state="queued",
            done=0,
            total=0,
            message="queued",
            result={"params": params or {}},
            created_at=job_store.now(),
        ),
    )


def queue_reevaluation(session: Session, campaign_id: int, settings_version: int) -> Job:
    return new_job(session, "reevaluate", campaign_id, {"settings_version": settings_version})


def job_params(job: Job) -> dict[str, Any]:
    return dict((job.result or {}).get("params", {}))


def job_out(job: Job, campaign_slug: str | None) -> JobOut:
    return JobOut(
        id=job.id,
        kind=job.kind,
        campaign=campaign_slug,
        state=job.state,  # type: ignore[arg-type]
        done=job.done,
        total=job.total,
        message=job.message,
        result={k: v for k, v in (job.result or {}).items() if k != "params"},
        created_at=job.created_at,
        started_at=job.started_at,
        finished_at=job.finished_at,
    )


class JobRunner:
    """Runs jobs on daemon threads; one per app (``app.state.jobs``)."""

    def __init__(self, factory: sessionmaker[Session]) -> None:
        self._factory = factory
        self._threads: dict[str, threading.Thread] = {}
        self._lock = threading.Lock()

    def start(self, job_id: str) -> None:
        with self._lock:
            if job_id in self._threads and self._threads[job_id].is_alive():
                return
            thread = threading.Thread(target=self._run, args=(job_id,), name=f"job-{job_id[:8]}", daemon=True)
            self._threads[job_id] = thread
            thread.start()

    def resume_unfinished(self) -> None:
        with self._factory() as session:
            ids = job_store.unfinished_job_ids(session)
        for job_id in ids:
            self.start(job_id)

    def join(self, timeout: float = 10.0) -> None:
        for thread in list(self._threads.values()):
            thread.join(timeout)

    def _update(self, job_id: str, merge_result: dict[str, Any] | None = None, **values: Any) -> str | None:
        """Write job fields in their own transaction; returns the job kind (None if gone)."""
        with self._factory() as session:
            begin_write(session)  # read-then-write: take the SQLite write lock first
            job = job_store.get_job(session, job_id)
            if job is None:
                return None
            if merge_result is not None:
                values["result"] = {**(job.result or {}), **merge_result}
            job_store.set_job(session, job_id, **values)
            session.commit()
            return job.kind

    def _run(self, job_id: str) -> None:
        kind = self._update(job_id, state="running", started_at=job_store.now(), message="running")
        if kind is None:
            return

        def progress(done: int, total: int, message: str) -> None:
            self._update(job_id, done=done, total=total, message=message)

        try:
            result = JOB_KINDS[kind](self._factory, job_id, progress)
        except Exception as exc:  # the job fails, the process carries on
            log.exception("job %s failed", job_id)
            self._update(job_id, merge_result={"error": type(exc).__name__}, state="failed",
                         finished_at=job_store.now(), message=f"{type(exc).__name__}: {exc}"[:2000])
            return
        self._update(job_id, merge_result=result, state="succeeded", finished_at=job_store.now(), message="done")


@job_kind("reevaluate")
def run_reevaluation(factory: sessionmaker[Session], job_id: str, progress: Progress) -> dict[str, Any]:
    """Re-evaluate every shot of the campaign evaluated with older settings or another model version."""
    from app.services.ingest import reevaluate_campaign
    from app.store.campaigns import get_campaign_by_id

    with factory() as session:
        job = job_store.get_job(session, job_id)
        slug = get_campaign_by_id(session, job.campaign_id).slug
    return {"reevaluated": reevaluate_campaign(factory, slug, progress)}
