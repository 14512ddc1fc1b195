"""Running and waiting for background jobs in tests.

Nothing runs jobs inside the app: in-process tests run the queue deterministically in the
test's own thread (``run_queued_jobs``, a worker's ``drain``); tests of real worker
processes use the ``job_worker`` fixture (tests/conftest.py) and wait on the API.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from datetime import datetime
from typing import Any


def run_queued_jobs(app, clock: Callable[[], datetime] | None = None) -> int:
    """Run every claimable job of the app's database in this thread; returns how many ran.

    ``clock`` is the worker's "now" (a test moves it on to see a retry's backoff pass)."""
    from app.services.job_kinds import KINDS
    from app.services.workers import Worker

    if clock is None:
        return Worker(app.state.session_factory, KINDS, name="tests-drain").drain()
    return Worker(app.state.session_factory, KINDS, name="tests-drain", clock=clock).drain()


class TestClock:
    """A clock that stands still until a test moves it (``advance_to``); starts at the real now."""

    __test__ = False  # not a test class

    def __init__(self) -> None:
        from app.store.jobs import now

        self.now = now()

    def __call__(self) -> datetime:
        return self.now

    def advance_to(self, moment: datetime) -> None:
        self.now = max(self.now, moment)


def wait_for_job(client, job_id: str, headers: dict[str, str], timeout_s: float = 60.0) -> dict[str, Any]:
    """The job once it has ended (succeeded, failed or cancelled).

    A TestClient's app runs its queue here first; otherwise (a live server) a worker
    process must be running, and the API is polled (bounded: timeout_s).
    """
    app = getattr(client, "app", None)
    if app is not None and hasattr(app, "state"):
        run_queued_jobs(app)
    deadline = time.monotonic() + timeout_s
    while True:
        job = client.get(f"/api/v1/jobs/{job_id}", headers=headers).json()
        if job["state"] in ("succeeded", "failed", "cancelled"):
            return job
        if time.monotonic() > deadline:
            raise AssertionError(f"job {job_id} did not finish within {timeout_s} s: {job}")
        time.sleep(0.05)


# Settings of the job worker a browser test starts: it keeps the pages' priority, because at the
# default niceness (10) a CPU-bound process beside the suite starves it past any bound
# (`wakeledger serve` keeps WAKELEDGER_WORKER_NICENESS, default 10).
TEST_WORKER = {"worker_niceness": 0}
