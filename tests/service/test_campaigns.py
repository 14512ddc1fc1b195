"""Campaigns, their settings, and re-evaluation after a settings change."""

from __future__ import annotations

from sqlalchemy import select

from app.tables import AuditEntry, Evaluation
from tests.support.jobs import wait_for_job


def test_an_admin_creates_a_campaign_and_everyone_can_read_it(client, admin_headers, viewer_headers):
    response = client.post(
        "/api/v1/campaigns",
        headers=admin_headers,
        json={
            "slug": "run-12",
            "name": "Run 12",
            "timezone": "Europe/Zurich",
            "settings": {"limits": {"WEAK_SEED": {"marginal": 5.0}}},
        },
    )
    assert response.status_code == 201, response.text
    assert response.headers["location"] == "/api/v1/campaigns/run-12"
    body = client.get("/api/v1/campaigns/run-12", headers=viewer_headers).json()
    assert body["timezone"] == "Europe/Zurich"
    assert body["settings"] == {"limits": {"WEAK_SEED": {"marginal": 5.0}}}
    assert body["effective_settings"]["limits"]["WEAK_SEED"] == {"marginal": 5.0, "outside": 2.0}
    assert body["settings_version"] == 1
    assert body["shot_count"] == 0
    assert [c["slug"] for c in client.get("/api/v1/campaigns", headers=viewer_headers).json()["items"]] == ["run-12"]


def test_a_second_campaign_with_the_same_slug_gets_409(client, admin_headers, campaign):
    response = client.post("/api/v1/campaigns", json={"slug": campaign, "name": "Again"}, headers=admin_headers)
    assert response.status_code == 409


def test_a_campaign_with_a_bad_slug_unknown_zone_or_unknown_setting_gets_422_naming_each(client, admin_headers):
    response = client.post(
        "/api/v1/campaigns", headers=admin_headers, json={"slug": "Bad Slug", "name": "x", "timezone": "Mars/Olympus"}
    )
    assert response.status_code == 422
    assert sorted(e["field"] for e in response.json()["errors"]) == ["slug", "timezone"]
    response = client.post(
        "/api/v1/campaigns",
        headers=admin_headers,
        json={"slug": "ok", "name": "x", "settings": {"noise_floor": "high", "no_such_setting": 1}},
    )
    assert response.status_code == 422
    assert sorted(e["field"] for e in response.json()["errors"]) == ["settings.no_such_setting", "settings.noise_floor"]


def test_limits_out_of_order_are_refused_by_the_model_check(client, admin_headers, campaign):
    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        headers=admin_headers,
        json={"limits": {"BEAM_TOO_WIDE": {"marginal": 5.0, "outside": 2.0}}},
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "settings.limits.BEAM_TOO_WIDE"
    assert "BEAM_TOO_WIDE" in response.json()["errors"][0]["reason"]


def test_an_unknown_campaign_gets_404(client, viewer_headers):
    response = client.get("/api/v1/campaigns/nope", headers=viewer_headers)
    assert response.status_code == 404
    assert response.json()["title"] == "Not found"


def test_changing_settings_re_evaluates_every_shot_in_a_background_job(
    app, client, admin_headers, ingest_headers, viewer_headers, campaign, make_shot
):
    shots = [make_shot(1, shot_id=f"s-{i}", taken_at=f"2026-11-17T10:00:{i:02d}Z") for i in range(40)]
    client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    before = client.get(f"/api/v1/campaigns/{campaign}/shots/s-0", headers=viewer_headers).json()["evaluation"]
    assert "BEAM_TOO_WIDE" in {f["code"] for f in before["flags"]}

    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        headers=admin_headers,
        json={"limits": {"BEAM_TOO_WIDE": {"marginal": 5.0, "outside": 10.0}}},
    )
    assert response.status_code == 202, response.text
    body = response.json()
    assert body["campaign"]["settings_version"] == 2
    assert response.headers["location"] == f"/api/v1/jobs/{body['job']['id']}"
    job = wait_for_job(client, body["job"]["id"], viewer_headers, timeout_s=20)
    assert job["state"] == "succeeded", job
    assert (job["done"], job["total"], job["result"]["reevaluated"]) == (40, 40, 40)

    after = client.get(f"/api/v1/campaigns/{campaign}/shots/s-0", headers=viewer_headers).json()["evaluation"]
    assert after["settings_version"] == 2
    assert "BEAM_TOO_WIDE" not in {f["code"] for f in after["flags"]}
    with app.state.session_factory() as session:
        versions = set(session.scalars(select(Evaluation.settings_version)))
    assert versions == {2}
    flagged = client.get(
        f"/api/v1/campaigns/{campaign}/shots", params={"flag": "BEAM_TOO_WIDE"}, headers=viewer_headers
    ).json()["items"]
    assert flagged == []


def test_null_in_a_settings_patch_goes_back_to_the_default(client, admin_headers, viewer_headers, campaign):
    client.patch(f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": 0.002}, headers=admin_headers)
    client.patch(f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": None}, headers=admin_headers)
    body = client.get(f"/api/v1/campaigns/{campaign}", headers=viewer_headers).json()
    assert body["settings"] == {}
    assert body["settings_version"] == 3


def test_shots_posted_after_a_settings_change_use_the_new_settings(
    client, admin_headers, ingest_headers, campaign, make_shot
):
    client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        headers=admin_headers,
        json={"limits": {"BEAM_TOO_WIDE": {"marginal": 5.0, "outside": 10.0}}},
    )
    evaluation = client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(1), headers=ingest_headers).json()[
        "evaluation"
    ]
    assert evaluation["settings_version"] == 2
    assert "BEAM_TOO_WIDE" not in {f["code"] for f in evaluation["flags"]}


def test_an_unknown_job_gets_404(client, viewer_headers):
    assert client.get("/api/v1/jobs/0000", headers=viewer_headers).status_code == 404


def test_writes_leave_an_audit_trail(app, client, admin_headers, ingest_headers, campaign, make_shot):
    client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(), headers=ingest_headers)
    client.put(
        f"/api/v1/campaigns/{campaign}/shots/ex-1", json=make_shot(changes={"notes": "fixed"}), headers=ingest_headers
    )
    client.patch(f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": 0.002}, headers=admin_headers)
    with app.state.session_factory() as session:
        actions = [(a.action, a.actor) for a in session.scalars(select(AuditEntry).order_by(AuditEntry.id))]
    assert ("campaign.create", "token:test-admin") in actions
    assert ("shots.ingest", "token:test-ingest") in actions
    assert ("shot.correct", "token:test-ingest") in actions
    assert ("campaign.settings", "token:test-admin") in actions


def test_a_re_evaluation_interrupted_by_a_restart_finishes_when_the_service_starts_again(
    settings, client, admin_headers, ingest_headers, viewer_headers, campaign, make_shot
):
    from starlette.testclient import TestClient

    from app.main import create_app
    from app.services.campaign_settings import change_settings
    from app.services.job_kinds import KINDS

    shots = [make_shot(0, shot_id=f"r-{i}", taken_at=f"2026-11-17T10:00:{i:02d}Z") for i in range(5)]
    client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    restarted = create_app(settings)
    with restarted.state.session_factory() as session:  # the settings change commits, then the process "dies"
        _campaign, job = change_settings(session, campaign, {"noise_floor": 0.002}, "test")
    assert job.state == "queued"
    with TestClient(restarted) as again:  # start-up resumes unfinished jobs
        finished = wait_for_job(again, job.id, viewer_headers, timeout_s=20)
    restarted.state.engine.dispose()
    assert finished["state"] == "succeeded"
    assert finished["result"]["reevaluated"] == 5
    assert KINDS["reevaluate"]
