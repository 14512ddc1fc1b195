"""Jobs run in worker processes that share one queue: claims, leases, takeover after a
crash, cancelling, stopping, queue limits. Every wait is on a condition with a generous
bound; worker processes started here are reaped by the ``job_worker`` fixture."""

from __future__ import annotations

import os
import signal
import threading
import time
from collections.abc import Callable
from datetime import timedelta
from typing import Any

import pytest

from app.services import jobs as job_service
from app.services.auth import TokenInfo
from app.services.workers import Worker
from app.store import jobs as job_store
from tests.support.detailed_runs import post_quick_shot
from tests.support.jobs import run_queued_jobs, wait_for_job

SLOW_RUN = {"dz_m": 0.004}  # ex-1 over 8 m in 2,000 steps: several seconds of solving


def _until(condition: Callable[[], Any], timeout_s: float = 60.0, what: str = "the condition") -> Any:
    deadline = time.monotonic() + timeout_s
    while True:
        value = condition()
        if value:
            return value
        if time.monotonic() > deadline:
            raise AssertionError(f"{what} did not happen within {timeout_s} s")
        time.sleep(0.05)


def _queue(app, kind: str, params: dict[str, Any] | None = None, submitter: TokenInfo | None = None) -> str:
    with app.state.session_factory() as session:
        job = job_service.queue_job(session, kind, None, params, submitter=submitter)
        session.commit()
        return job.id


def _job(app, job_id: str):
    with app.state.session_factory() as session:
        return job_store.get_job(session, job_id)


def _job_api(client, job_id: str, headers) -> dict[str, Any]:
    return client.get(f"/api/v1/jobs/{job_id}", headers=headers).json()


def _slow_run(client, campaign, headers, make_shot) -> str:
    client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot("ex-1", shot_id="slow-1"), headers=headers)
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/slow-1/detailed-runs", json=SLOW_RUN, headers=headers)
    assert response.status_code == 202, response.text
    return response.json()["job_id"]


# --- one queue, many workers -----------------------------------------------------------------------


def test_two_workers_draining_one_queue_run_every_job_exactly_once(app):
    runs: list[tuple[str, str]] = []
    lock = threading.Lock()

    def record(ctx: job_service.JobContext) -> dict[str, Any]:
        with lock:
            runs.append((ctx.job_id, threading.current_thread().name))
        ctx.progress(1, 1, "done")
        return {}

    ids = {_queue(app, "record") for _ in range(12)}
    workers = [Worker(app.state.session_factory, {"record": record}, name=f"w{i}") for i in range(2)]
    threads = [threading.Thread(target=w.drain, name=w.owner) for w in workers]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    assert sorted(job_id for job_id, _ in runs) == sorted(ids)
    assert all(_job(app, job_id).state == "succeeded" and _job(app, job_id).attempts == 1 for job_id in ids)


def test_a_job_whose_worker_died_is_taken_over_once_its_lease_has_run_out(app):
    job_id = _queue(app, "finish")
    kinds = {"finish": lambda ctx: {"by": "second"}}
    dead = Worker(app.state.session_factory, kinds, name="dead", lease=timedelta(seconds=0.5))
    assert dead.claim() is not None  # it claims the job and then never beats again
    second = Worker(app.state.session_factory, kinds, name="second")
    assert second.claim() is None  # the lease is still valid
    _until(second.run_one, 30, "the takeover")
    job = _job(app, job_id)
    assert (job.state, job.attempts, job.lease_owner, job.result["by"]) == ("succeeded", 2, "second", "second")
    dead._finish(job_id, "failed", "late")  # the dead worker's late write changes nothing
    assert _job(app, job_id).state == "succeeded"


def _checkpointed(app, job_id: str) -> bool:
    job = _job(app, job_id)
    return job is not None and job.checkpoint is not None


def test_a_worker_killed_mid_run_loses_its_lease_and_another_resumes_the_run_from_its_checkpoint(
    app, client, campaign, ingest_headers, viewer_headers, make_shot, job_worker
):
    job_id = _slow_run(client, campaign, ingest_headers, make_shot)
    first = job_worker(job_lease_seconds=2, job_heartbeat_seconds=0.5, job_checkpoint_seconds=0.5)
    _until(lambda: _checkpointed(app, job_id), 120, "the run's first checkpoint")
    os.kill(first.pid, signal.SIGKILL)
    first.wait(timeout=30)
    assert _job_api(client, job_id, viewer_headers)["state"] == "running"  # the lease has not run out yet
    job_worker(job_lease_seconds=2, job_heartbeat_seconds=0.5)
    job = _until(
        lambda: (j := _job_api(client, job_id, viewer_headers))["state"] in ("succeeded", "failed") and j,
        300,
        "the second worker finishing the run",
    )
    assert job["state"] == "succeeded" and job["attempts"] == 2, job
    assert job["result"]["resumed_from_step"] > 0
    runs = client.get(f"/api/v1/campaigns/{campaign}/shots/slow-1/detailed-runs", headers=viewer_headers).json()
    assert [r["id"] for r in runs["items"]] == [job["result"]["run_id"]]


def test_stopping_a_worker_never_waits_on_its_job_and_hands_it_back(
    app, client, campaign, ingest_headers, viewer_headers, make_shot, job_worker
):
    job_id = _slow_run(client, campaign, ingest_headers, make_shot)
    worker = job_worker(job_checkpoint_seconds=0.5)
    _until(lambda: _checkpointed(app, job_id), 120, "the run's first checkpoint")
    worker.send_signal(signal.SIGTERM)
    assert worker.wait(timeout=30) == 0
    job = _job_api(client, job_id, viewer_headers)
    assert job["state"] == "queued" and job["attempts"] == 1 and job["done"] >= 1  # handed back, progress kept
    finished = wait_for_job(client, job_id, viewer_headers, timeout_s=300)
    assert finished["state"] == "succeeded" and finished["result"]["resumed_from_step"] > 0


# --- cancelling ------------------------------------------------------------------------------------


def test_cancelling_a_queued_job_ends_it_at_once_and_no_worker_runs_it(
    client, app, campaign, ingest_headers, make_shot
):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    job_id = client.post(f"/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs", headers=ingest_headers).json()[
        "job_id"
    ]
    response = client.delete(f"/api/v1/jobs/{job_id}", headers=ingest_headers)
    assert response.status_code == 200 and response.json()["state"] == "cancelled"
    assert run_queued_jobs(app) == 0
    assert client.delete(f"/api/v1/jobs/{job_id}", headers=ingest_headers).json()["state"] == "cancelled"


def test_a_running_job_stops_at_its_next_progress_report_when_cancelled(client, app, admin_headers):
    started = threading.Event()

    def patient(ctx: job_service.JobContext) -> dict[str, Any]:
        started.set()
        deadline = time.monotonic() + 60
        step = 0
        while time.monotonic() < deadline:
            step += 1
            ctx.progress(step, 10**6, "waiting to be cancelled")
            time.sleep(0.02)
        return {"never": "cancelled"}

    job_id = _queue(app, "patient")
    worker = Worker(app.state.session_factory, {"patient": patient}, name="patient-worker")
    thread = threading.Thread(target=worker.run_one)
    thread.start()
    assert started.wait(30)
    response = client.delete(f"/api/v1/jobs/{job_id}", headers=admin_headers)
    assert response.status_code == 200 and response.json()["cancel_requested"] is True
    thread.join(timeout=60)
    assert not thread.is_alive()
    assert _job_api(client, job_id, admin_headers)["state"] == "cancelled"


def test_only_the_submitter_or_an_admin_may_cancel_and_a_finished_job_cannot_be(
    client, app, campaign, ingest_headers, admin_headers, make_shot
):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    job_id = client.post(f"/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs", headers=ingest_headers).json()[
        "job_id"
    ]
    with app.state.session_factory() as session:
        from app.services.auth import create_token

        other = create_token(session, "ingest", "another-daq", actor="tests")
    assert client.delete(f"/api/v1/jobs/{job_id}", headers={"Authorization": f"Bearer {other}"}).status_code == 403
    assert wait_for_job(client, job_id, ingest_headers)["state"] == "succeeded"
    assert client.delete(f"/api/v1/jobs/{job_id}", headers=admin_headers).status_code == 409


# --- limits and progress ------------------------------------------------------------------------------


def test_queued_jobs_are_limited_per_token_and_per_campaign_with_429(
    settings, campaign, client, ingest_headers, admin_headers, make_shot
):
    from starlette.testclient import TestClient

    from app.main import create_app

    shots = [post_quick_shot(client, campaign, ingest_headers, make_shot, shot_id=f"q-{i}") for i in range(4)]
    strict = create_app(settings.model_copy(update={"max_jobs_per_token": 2, "max_jobs_per_campaign": 3}))
    try:
        with TestClient(strict) as limited:

            def start(shot: str, headers) -> int:
                url = f"/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs"
                return limited.post(url, headers=headers).status_code

            assert [start(s, ingest_headers) for s in shots[:3]] == [202, 202, 429]
            assert start(shots[2], admin_headers) == 202  # another token: the campaign's third
            response = limited.post(
                f"/api/v1/campaigns/{campaign}/shots/{shots[3]}/detailed-runs", headers=admin_headers
            )
            assert response.status_code == 429
            assert "campaign already has 3" in response.json()["detail"]
    finally:
        strict.state.engine.dispose()


def test_a_resumed_reevaluation_keeps_its_total(client, app, campaign, ingest_headers, admin_headers, make_shot):
    from app.services.reevaluation import reevaluate_stale_chunk

    shots = [make_shot(i % 3, shot_id=f"r-{i}", taken_at=f"2026-11-17T11:00:{i:02d}Z") for i in range(12)]
    client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    job_id = client.patch(
        f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": 0.002}, headers=admin_headers
    ).json()["job"]["id"]
    # An earlier attempt re-evaluated 5 of the 12 shots, reported it, and its worker died.
    with app.state.session_factory() as session:
        assert reevaluate_stale_chunk(session, campaign, chunk=5) == 5
    with app.state.session_factory() as session:
        job_store.set_job(session, job_id, done=5, total=12, attempts=1, message="re-evaluated 5 of 12 shots")
        session.commit()
    job = wait_for_job(client, job_id, admin_headers)
    assert (job["state"], job["done"], job["total"], job["attempts"]) == ("succeeded", 12, 12, 2)


@pytest.mark.parametrize("role", ["viewer", "ingest"])
def test_only_admins_list_the_jobs(client, request, role):
    headers = request.getfixturevalue(f"{role}_headers")
    assert client.get("/api/v1/jobs", headers=headers).status_code == 403
