"""Running and waiting for background jobs in tests.

Nothing runs jobs inside the app: in-process tests run the queue deterministically in the
test's own thread (``run_queued_jobs``, a worker's ``drain``); tests of real worker
processes use the ``job_worker`` fixture (tests/conftest.py) and wait on the API.
"""

from __future__ import annotations

import time
from typing import Any


def run_queued_jobs(app) -> int:
    """Run every queued job of the app's database in this thread; returns how many ran."""
    from app.services.job_kinds import KINDS
    from app.services.workers import Worker

    return Worker(app.state.session_factory, KINDS, name="tests-drain").drain()


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
