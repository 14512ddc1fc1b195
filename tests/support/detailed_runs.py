"""Helpers shared by the detailed-run tests (service and dashboard): a quick shot and a quick run."""

from __future__ import annotations

from typing import Any

from tests.support.jobs import wait_for_job

# Worked example ex-1 with a 0.5 m plasma: about 2,400 slices x 200 steps, well under a second.
QUICK_CHANGES = {"plasma.length_m": 0.5}


def post_quick_shot(client, campaign: str, headers: dict[str, str], make_shot, shot_id: str = "quick-1") -> str:
    response = client.post(
        f"/api/v1/campaigns/{campaign}/shots",
        json=make_shot("ex-1", shot_id=shot_id, changes=QUICK_CHANGES),
        headers=headers,
    )
    assert response.status_code == 201, response.text
    return shot_id


def run_quick_detailed_run(client, campaign: str, headers: dict[str, str], shot_id: str) -> dict[str, Any]:
    """Start a run of the shot and wait for it; returns the finished job."""
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/{shot_id}/detailed-runs", headers=headers)
    assert response.status_code == 202, response.text
    job = wait_for_job(client, response.json()["job_id"], headers)
    assert job["state"] == "succeeded", job
    return job
