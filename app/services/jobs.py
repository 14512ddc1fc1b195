"""Background jobs: infrastructure only (the kinds live with the work they do).

- ``queue_job(session, kind, campaign_id, params, ...)`` is the one way to ask for work:
  it inserts a queued row in the caller's transaction (refusing past the queue limits
  of the campaign and of the submitting token). Nothing runs in the process that queues:
  worker processes (``app.services.workers``, ``wakeledger worker``) claim queued rows
  from the table, on any host that reaches the database.
- A job kind is a function ``run(ctx: JobContext) -> result`` registered by name in
  ``app.services.job_kinds``. It reports progress through ``ctx.progress``, may keep a
  checkpoint (``ctx.save_checkpoint`` / ``ctx.checkpoint``) and must be safe to resume:
  a job whose worker died is claimed again, with its checkpoint and its progress so far.
- ``cancel_job``: a queued job is cancelled at once; a running one is asked to stop and
  its worker ends it at the next progress report or heartbeat.
- ``RetryLater``: a job that should run again after a pause (an alert delivery whose
  receiver did not answer) raises it; the worker puts the job back in the queue, claimable
  from the given instant (``jobs.not_before``).
"""

from __future__ import annotations

import threading
import uuid
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from app.database import begin_write, run_write
from app.errors import Conflict, Forbidden, NotFound, TooManyJobs
from app.schemas import JobOut
from app.services.auth import TokenInfo
from app.store import audit
from app.store import campaigns as campaign_store
from app.store import jobs as job_store
from app.tables import Job

Progress = Callable[[int, int, str], None]  # (done, total, message)


@dataclass(frozen=True)
class JobLimits:
    """How many unfinished jobs a campaign, and a token, may have at once (None: no limit)."""

    per_campaign: int | None = None
    per_token: int | None = None


NO_LIMITS = JobLimits()

# Kinds the queue limits neither count nor refuse: small jobs the service queues by itself,
# one per alert (``app.services.alerts``), which must never hold up ingest nor crowd a
# person's detailed runs out of the campaign's queue.
UNCOUNTED_KINDS: frozenset[str] = frozenset({"alert_delivery"})


class RetryLater(Exception):
    """Raised by a running job to be run again later: its worker puts it back in the queue,
    claimable from ``after`` (its attempts so far are kept)."""

    def __init__(self, after: datetime, message: str) -> None:
        super().__init__(message)
        self.after = after
        self.message = message


class JobStopped(Exception):
    """Raised inside a running job when it must stop now: ``reason`` is "cancelled",
    "lease lost" (another worker took it over) or "worker stopping"."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


@dataclass
class JobContext:
    """What a running job sees: its row's parameters, progress so far and checkpoint, and
    the calls that report progress and keep a checkpoint (each raises JobStopped once the
    job must stop)."""

    factory: sessionmaker[Session]
    job_id: str
    kind: str
    campaign_id: int | None
    params: dict[str, Any]
    done: int  # progress recorded before this attempt (a resumed job keeps its figures)
    total: int
    attempt: int
    checkpoint: bytes | None
    report: Callable[[dict[str, Any]], None]  # writes job fields while this worker holds the lease
    checkpoint_interval_s: float = 10.0  # how often a long job should keep a checkpoint
    clock: Callable[[], datetime] = job_store.now  # the worker's clock (tests move it on)
    stop: threading.Event = field(default_factory=threading.Event)
    stop_reason: list[str] = field(default_factory=list)

    def check(self) -> None:
        """Raise JobStopped if the job was cancelled, lost its lease or the worker is stopping."""
        if self.stop.is_set():
            raise JobStopped(self.stop_reason[0] if self.stop_reason else "worker stopping")

    def progress(self, done: int, total: int, message: str) -> None:
        self.check()
        self.done, self.total = done, total
        self.report({"done": done, "total": total, "message": message[:2000]})

    def save_checkpoint(self, data: bytes) -> None:
        self.check()
        self.checkpoint = data
        self.report({"checkpoint": data})


JobRun = Callable[[JobContext], dict[str, Any]]


def queue_job(
    session: Session,
    kind: str,
    campaign_id: int | None,
    params: Mapping[str, Any] | None = None,
    *,
    submitter: TokenInfo | None = None,
    actor: str = "",
    limits: JobLimits = NO_LIMITS,
) -> Job:
    """Insert a queued job row in the caller's transaction (a worker starts it once it commits).

    TooManyJobs when the campaign or the submitting token already has ``limits`` unfinished jobs
    (jobs of ``UNCOUNTED_KINDS`` are neither counted nor refused).
    """
    token_id = submitter.token_id if submitter is not None else None
    if kind in UNCOUNTED_KINDS:
        limits = NO_LIMITS
    uncounted = sorted(UNCOUNTED_KINDS)
    if limits.per_campaign is not None and campaign_id is not None:
        if job_store.count_unfinished(session, campaign_id=campaign_id, except_kinds=uncounted) >= limits.per_campaign:
            raise TooManyJobs(
                f"the campaign already has {limits.per_campaign} queued or running jobs; "
                "wait for one to finish or cancel one"
            )
    if limits.per_token is not None and token_id is not None:
        if job_store.count_unfinished(session, token_id=token_id, except_kinds=uncounted) >= limits.per_token:
            raise TooManyJobs(
                f"this token already has {limits.per_token} queued or running jobs; "
                "wait for one to finish or cancel one"
            )
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
            result={"params": dict(params or {})},
            created_at=job_store.now(),
            submitted_by=actor or (submitter.actor if submitter is not None else ""),
            submitter_token_id=token_id,
            attempts=0,
        ),
    )


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
        submitted_by=job.submitted_by or "",
        attempts=job.attempts or 0,
        cancel_requested=job.cancel_requested_at is not None,
    )


def _slug(session: Session, job: Job) -> str | None:
    campaign = campaign_store.get_campaign_by_id(session, job.campaign_id) if job.campaign_id else None
    return campaign.slug if campaign else None


def job_detail(session: Session, job_id: str) -> JobOut:
    """A job as the API shows it, or NotFound."""
    job = job_store.get_job(session, job_id)
    if job is None:
        raise NotFound(f"job {job_id!r}")
    return job_out(job, _slug(session, job))


def job_list(session: Session, limit: int = 50) -> list[JobOut]:
    """Queued and running jobs, then the latest finished ones (the admin page)."""
    return [job_out(job, _slug(session, job)) for job in job_store.recent_jobs(session, limit)]


def may_cancel(who: TokenInfo, job: Job) -> bool:
    """The submitter (the same token) or an admin may cancel a job."""
    return who.can("admin") or (who.token_id is not None and who.token_id == job.submitter_token_id)


def cancel_job(session: Session, job_id: str, who: TokenInfo) -> JobOut:
    """Cancel a queued job now, or ask a running one to stop (its worker ends it shortly).

    Forbidden for anyone but the submitter or an admin; Conflict for a finished job.
    Cancelling a cancelled job changes nothing.
    """

    def work() -> Job:
        begin_write(session)
        job = job_store.get_job(session, job_id)
        if job is None:
            raise NotFound(f"job {job_id!r}")
        if not may_cancel(who, job):
            raise Forbidden("only the token that queued the job, or an admin, may cancel it")
        if job.state == "cancelled" or job.cancel_requested_at is not None:
            return job
        if job.state not in job_store.UNFINISHED:
            raise Conflict(f"the job has already {job.state}")
        now = job_store.now()
        if job.state == "queued":
            job_store.set_job(
                session, job_id, state="cancelled", finished_at=now, cancel_requested_at=now, message="cancelled"
            )
        else:
            job_store.set_job(session, job_id, cancel_requested_at=now, message="cancelling")
        audit.record(
            session,
            who.actor,
            "job.cancel",
            campaign_slug=_slug(session, job),
            target=job_id,
            detail={"kind": job.kind},
        )
        session.flush()
        session.refresh(job)
        return job

    job = run_write(session, work)
    return job_out(job, _slug(session, job))
