"""Background jobs: infrastructure only (the kinds live with the work they do).

- ``queue_job(session, kind, campaign_id, params)`` is the one way to ask for work: it
  inserts a queued row in the caller's transaction. When that transaction commits, the
  session factory's runner (if one is attached) is notified and starts the job; with no
  runner attached (a CLI process, or a server that has not started yet) the row waits
  in the table until a runner resumes it. Nobody calls a runner directly.
- A runner (``JobRunner``) runs queued jobs; ``ThreadRunner`` runs each on a daemon
  thread of this process. A job is a function ``run(factory, job_id, progress) -> result``
  looked up by kind in the mapping the runner is given (``app.services.job_kinds``).
  Progress and results are written to the ``jobs`` table, so any process can read them.
- Jobs left queued or running by a stopped process are resumed when a runner starts,
  so every kind must be safe to restart.
"""

from __future__ import annotations

import logging
import threading
import uuid
from collections.abc import Callable, Mapping
from typing import Any, Protocol

from sqlalchemy import event
from sqlalchemy.orm import Session, sessionmaker

from app.database import begin_write
from app.errors import NotFound
from app.schemas import JobOut
from app.store import campaigns as campaign_store
from app.store import jobs as job_store
from app.tables import Job

log = logging.getLogger(__name__)

Progress = Callable[[int, int, str], None]  # (done, total, message)
JobRun = Callable[[sessionmaker[Session], str, Progress], dict[str, Any]]

_QUEUED = "wakeledger.queued_jobs"  # session.info: ids queued in the open transaction
_RUNNER = "wakeledger.job_runner"  # session.info (set by the factory): the runner to notify


class JobRunner(Protocol):
    """What runs queued jobs. The thread runner is the one in use; a worker loop that
    claims jobs from the table can take its place behind the same three calls."""

    def start(self, job_id: str) -> None:
        """A queued job was committed: run it (a no-op if it already runs)."""

    def resume_unfinished(self) -> None:
        """Run every job left queued or running."""

    def join(self, timeout: float = 10.0) -> None:
        """Wait (bounded) for the jobs this runner started."""


def queue_job(session: Session, kind: str, campaign_id: int | None, params: Mapping[str, Any] | None = None) -> Job:
    """Insert a queued job row in the caller's transaction; it starts once that commits."""
    job = job_store.add_job(
        session,
        Job(
            id=str(uuid.uuid4()),
            kind=kind,
            campaign_id=campaign_id,
            state="queued",
            done=0,
            total=0,
            message="queued",
            result={"params": dict(params or {})},
            created_at=job_store.now(),
        ),
    )
    session.info.setdefault(_QUEUED, []).append(job.id)
    return job


@event.listens_for(Session, "after_commit")
def _notify_runner(session: Session) -> None:
    queued = session.info.pop(_QUEUED, None)
    runner: JobRunner | None = session.info.get(_RUNNER)
    if queued and runner is not None:
        for job_id in queued:
            runner.start(job_id)


@event.listens_for(Session, "after_rollback")
def _forget_queued(session: Session) -> None:
    session.info.pop(_QUEUED, None)


def attach_runner(factory: sessionmaker[Session], runner: JobRunner | None) -> None:
    """Sessions of ``factory`` notify ``runner`` of the jobs they commit (None: detach)."""
    info = dict(factory.kw.get("info") or {})
    if runner is None:
        info.pop(_RUNNER, None)
    else:
        info[_RUNNER] = runner
    factory.configure(info=info)


def job_detail(session: Session, job_id: str) -> JobOut:
    """A job as the API shows it, or NotFound."""
    job = job_store.get_job(session, job_id)
    if job is None:
        raise NotFound(f"job {job_id!r}")
    campaign = campaign_store.get_campaign_by_id(session, job.campaign_id) if job.campaign_id else None
    return job_out(job, campaign.slug if campaign else None)


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


class ThreadRunner:
    """Runs each job on a daemon thread of this process."""

    def __init__(self, factory: sessionmaker[Session], kinds: Mapping[str, JobRun]) -> None:
        self._factory = factory
        self._kinds = kinds
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
            run = self._kinds.get(kind)
            if run is None:
                raise LookupError(f"unknown job kind {kind!r}")
            result = run(self._factory, job_id, progress)
        except Exception as exc:  # the job fails, the process carries on
            log.exception("job %s failed", job_id)
            self._update(
                job_id,
                merge_result={"error": type(exc).__name__},
                state="failed",
                finished_at=job_store.now(),
                message=f"{type(exc).__name__}: {exc}"[:2000],
            )
            return
        self._update(job_id, merge_result=result, state="succeeded", finished_at=job_store.now(), message="done")
