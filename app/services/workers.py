"""Worker processes: claim queued jobs from the database and run them, one at a time.

Any number of workers, on any hosts that reach the database, share one queue (the
``jobs`` table). A worker claims a job by taking its lease atomically
(``app.store.jobs.claim_next``), renews it from a heartbeat thread while the job runs,
and writes progress only while it holds the lease. A worker that dies (kill -9, a lost
host) stops renewing; once its lease lapses another worker claims the job and resumes it
from the job's checkpoint and progress so far.

Stopping (SIGTERM or SIGINT) never waits on a job: the running job is interrupted at
once, handed back to the queue with its checkpoint, and the process exits.

- ``Worker.run_forever()`` is ``wakeledger worker``;
- ``Worker.drain()`` runs every claimable job in the calling thread and returns (tests,
  and a deterministic "run the queue now");
- ``LocalWorker`` starts one ``wakeledger worker`` subprocess beside ``serve`` or ``demo``.
"""

from __future__ import annotations

import logging
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from types import FrameType
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from app.database import begin_write, run_write
from app.services.jobs import JobContext, JobRun, JobStopped, RetryLater
from app.store import jobs as job_store

log = logging.getLogger(__name__)

DEFAULT_LEASE = timedelta(seconds=30)
DEFAULT_HEARTBEAT_S = 5.0
DEFAULT_POLL_S = 1.0
DEFAULT_CHECKPOINT_S = 10.0


class WorkerStopping(BaseException):
    """Raised in the worker's main thread by SIGTERM/SIGINT while a job runs (a BaseException,
    so that no job's ``except Exception`` swallows it)."""


@dataclass(frozen=True)
class _Claim:
    job_id: str
    kind: str
    campaign_id: int | None
    params: dict[str, Any]
    done: int
    total: int
    attempts: int
    checkpoint: bytes | None


class Worker:
    """Claims and runs jobs of the given kinds (``app.services.job_kinds.KINDS``)."""

    def __init__(
        self,
        factory: sessionmaker[Session],
        kinds: Mapping[str, JobRun],
        *,
        name: str | None = None,
        lease: timedelta = DEFAULT_LEASE,
        heartbeat_s: float = DEFAULT_HEARTBEAT_S,
        poll_s: float = DEFAULT_POLL_S,
        checkpoint_s: float = DEFAULT_CHECKPOINT_S,
        clock: Callable[[], datetime] = job_store.now,
    ) -> None:
        self.factory = factory
        self.clock = clock  # what "now" is for claims and retries (tests move it on)
        self.kinds = dict(kinds)
        self.owner = name or f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:6]}"
        self.lease = lease
        self.heartbeat_s = heartbeat_s
        self.poll_s = poll_s
        self.checkpoint_s = checkpoint_s
        self._stop_requested = False
        self._in_job = False

    # --- claiming and running one job ---------------------------------------------------------------

    def _write(self, work: Any) -> Any:
        with self.factory() as session:

            def txn() -> Any:
                begin_write(session)  # SQLite: BEGIN IMMEDIATE, the write lock before the read
                return work(session)

            return run_write(session, txn)

    def claim(self) -> _Claim | None:
        """Take the lease of the next claimable job, or None when there is none (an idle
        worker only reads: it takes the write lock when there is something to claim)."""
        with self.factory() as session:
            if not job_store.anything_to_claim(session, self.clock(), list(self.kinds)):
                return None

        def work(session: Session) -> _Claim | None:
            now = self.clock()
            job_store.end_abandoned_cancellations(session, now)
            job = job_store.claim_next(session, self.owner, now, now + self.lease, list(self.kinds))
            if job is None:
                return None
            return _Claim(
                job.id,
                job.kind,
                job.campaign_id,
                dict((job.result or {}).get("params", {})),
                job.done,
                job.total,
                job.attempts,
                job.checkpoint,
            )

        return self._write(work)

    def _report(self, ctx: JobContext, values: dict[str, Any]) -> None:
        """Write job fields while this worker holds the lease and no cancel was asked for."""

        def work(session: Session) -> str | None:
            if job_store.cancel_requested(session, ctx.job_id):
                return "cancelled"
            if not job_store.update_owned(session, ctx.job_id, self.owner, **values):
                return "lease lost"
            return None

        stopped = self._write(work)
        if stopped is not None:
            ctx.stop_reason[:] = [stopped]
            ctx.stop.set()
            raise JobStopped(stopped)

    def _heartbeat(self, ctx: JobContext, finished: threading.Event) -> None:
        while not finished.wait(self.heartbeat_s):
            try:

                def work(session: Session) -> str | None:
                    now = job_store.now()
                    if not job_store.renew_lease(session, ctx.job_id, self.owner, now, now + self.lease):
                        return "lease lost"
                    return "cancelled" if job_store.cancel_requested(session, ctx.job_id) else None

                stopped = self._write(work)
            except Exception:  # a database hiccup: try again at the next beat (the lease has slack)
                log.warning("heartbeat of job %s failed", ctx.job_id, exc_info=True)
                continue
            if stopped is not None:
                ctx.stop_reason[:] = [stopped]
                ctx.stop.set()
                return

    def _finish(self, job_id: str, state: str, message: str, result: dict[str, Any] | None = None) -> None:
        def work(session: Session) -> None:
            job = job_store.get_job(session, job_id)
            if job is None:
                return
            merged = {**(job.result or {}), **(result or {})}
            job_store.update_owned(
                session,
                job_id,
                self.owner,
                state=state,
                message=message[:2000],
                result=merged,
                finished_at=job_store.now(),
                lease_expires_at=None,
            )

        self._write(work)

    def _release(self, job_id: str) -> None:
        """Hand a job back to the queue (the worker is stopping), keeping its checkpoint and progress."""
        self._write(
            lambda session: job_store.update_owned(
                session,
                job_id,
                self.owner,
                state="queued",
                lease_owner=None,
                lease_expires_at=None,
                message="waiting for a worker (the last one stopped)",
            )
        )

    def _retry_later(self, job_id: str, again: RetryLater) -> None:
        """Put a job back in the queue, claimable from ``again.after`` (a retry's backoff)."""
        self._write(
            lambda session: job_store.update_owned(
                session,
                job_id,
                self.owner,
                state="queued",
                lease_owner=None,
                lease_expires_at=None,
                not_before=again.after,
                message=again.message[:2000],
            )
        )

    def run_one(self) -> bool:
        """Claim one job and run it to its end; False when the queue had nothing claimable."""
        claim = self.claim()
        if claim is None:
            return False
        ctx = JobContext(
            factory=self.factory,
            job_id=claim.job_id,
            kind=claim.kind,
            campaign_id=claim.campaign_id,
            params=claim.params,
            done=claim.done,
            total=claim.total,
            attempt=claim.attempts,
            checkpoint=claim.checkpoint,
            report=lambda values: self._report(ctx, values),
            checkpoint_interval_s=self.checkpoint_s,
            clock=self.clock,
        )
        finished = threading.Event()
        beat = threading.Thread(target=self._heartbeat, args=(ctx, finished), name="job-heartbeat", daemon=True)
        beat.start()
        self._in_job = True
        try:
            result = self.kinds[claim.kind](ctx)
        except JobStopped as stopped:
            if stopped.reason == "cancelled":
                self._finish(claim.job_id, "cancelled", "cancelled")
            elif stopped.reason == "worker stopping":
                self._release(claim.job_id)
            # "lease lost": another worker holds the job now; nothing of ours to write.
        except RetryLater as again:
            self._retry_later(claim.job_id, again)
        except WorkerStopping:
            self._in_job = False
            self._release(claim.job_id)
            raise
        except Exception as exc:  # the job fails, the worker carries on
            log.exception("job %s failed", claim.job_id)
            self._finish(claim.job_id, "failed", f"{type(exc).__name__}: {exc}", {"error": type(exc).__name__})
        else:
            self._finish(claim.job_id, "succeeded", "done", result)
        finally:
            self._in_job = False
            finished.set()
            beat.join(timeout=self.heartbeat_s + 5)
        return True

    def drain(self, max_jobs: int = 1000) -> int:
        """Run claimable jobs in this thread until none is left (at most ``max_jobs``); how many ran."""
        ran = 0
        while ran < max_jobs and self.run_one():
            ran += 1
        return ran

    # --- the process loop ---------------------------------------------------------------------------

    def _on_signal(self, signum: int, _frame: FrameType | None) -> None:
        self._stop_requested = True
        if self._in_job:
            raise WorkerStopping(signal.Signals(signum).name)

    def run_forever(self, parent_pid: int | None = None) -> None:
        """Poll the queue until SIGTERM or SIGINT (``wakeledger worker``); with ``parent_pid``,
        also once that process has ended (a local worker never outlives its server)."""
        for sig in (signal.SIGTERM, signal.SIGINT):
            signal.signal(sig, self._on_signal)
        if parent_pid is not None:
            threading.Thread(target=_stop_with_parent, args=(parent_pid,), name="parent-watch", daemon=True).start()
        log.info("worker %s polling every %.1f s", self.owner, self.poll_s)
        try:
            while not self._stop_requested:
                try:
                    ran = self.run_one()
                except WorkerStopping:
                    break
                except Exception:  # the database is away: wait and try again
                    log.warning("worker %s could not claim a job", self.owner, exc_info=True)
                    ran = False
                if not ran:
                    waited = 0.0
                    while waited < self.poll_s and not self._stop_requested:
                        time.sleep(min(0.1, self.poll_s))
                        waited += min(0.1, self.poll_s)
        finally:
            log.info("worker %s stopped", self.owner)


def _stop_with_parent(parent_pid: int) -> None:
    """Send this process SIGTERM once its parent is gone (it is re-parented), checked every second."""
    while os.getppid() == parent_pid:
        time.sleep(1.0)
    os.kill(os.getpid(), signal.SIGTERM)


class LocalWorker:
    """One ``wakeledger worker`` subprocess for a server on this host (``serve``, ``demo``);
    stopped (SIGTERM, then SIGKILL after ``grace_s``) when the server stops, and stopping by
    itself when the server's process ends any other way (e.g. a signal that ends it at once)."""

    def __init__(self, database_url: str, extra_args: Sequence[str] = (), grace_s: float = 5.0) -> None:
        self.database_url = database_url
        self.extra_args = list(extra_args)
        self.grace_s = grace_s
        self.process: subprocess.Popen[bytes] | None = None

    def __enter__(self) -> LocalWorker:
        command = [
            sys.executable,
            "-m",
            "app.cli",
            "--database-url",
            self.database_url,
            "worker",
            "--parent-pid",
            str(os.getpid()),
            *self.extra_args,
        ]
        self.process = subprocess.Popen(command)
        return self

    def __exit__(self, *_exc: object) -> None:
        if self.process is None or self.process.poll() is not None:
            return
        self.process.terminate()
        try:
            self.process.wait(self.grace_s)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
