"""Waiting for a background job through the API, shared by every test that starts one."""

from __future__ import annotations

import time
from typing import Any


def wait_for_job(client, job_id: str, headers: dict[str, str], timeout_s: float = 60.0) -> dict[str, Any]:
    """Poll GET /api/v1/jobs/{id} until the job has succeeded or failed (bounded: timeout_s)."""
    deadline = time.monotonic() + timeout_s
    while True:
        job = client.get(f"/api/v1/jobs/{job_id}", headers=headers).json()
        if job["state"] in ("succeeded", "failed"):
            return job
        if time.monotonic() > deadline:
            raise AssertionError(f"job {job_id} did not finish within {timeout_s} s: {job}")
        time.sleep(0.05)
