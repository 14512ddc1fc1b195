"""Alerts: an admin registers a webhook, and shots stored outside (or carrying chosen flags)
are delivered by the job workers to the receiver, with retries, backoff and a log."""

from __future__ import annotations

from datetime import datetime, timedelta

import pytest

import model
from app.services import alerts as alert_service
from app.store import jobs as job_store
from app.tables import AuditEntry, Job
from tests.support.jobs import TestClock, run_queued_jobs
from tests.support.receiver import alert_receiver

PUBLIC_URL = "https://ledger.invalid:8443"


@pytest.fixture
def settings(database_url: str):
    from app.config import Settings

    return Settings(
        database_url=database_url,
        migrate_on_start=False,
        demo_mode=False,
        public_url=PUBLIC_URL + "/",
        alert_timeout_seconds=60,  # a receiver held open by a test is not given up on
        alert_backoff_seconds=10,
        alert_attempts=5,
        alerts_per_request=3,
        max_jobs_per_campaign=2,
    )


def _hooks(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/webhooks"


def _register(client, campaign, headers, url, **body):
    response = client.post(_hooks(campaign), json={"url": url, **body}, headers=headers)
    assert response.status_code == 201, response.text
    return response.json()


def _post(client, campaign, headers, shot):
    response = client.post(f"/api/v1/campaigns/{campaign}/shots", json=shot, headers=headers)
    assert response.status_code == 201, response.text
    return response.json()


def _deliveries(client, campaign, headers):
    response = client.get(_hooks(campaign) + "/deliveries", headers=headers)
    assert response.status_code == 200, response.text
    return response.json()["items"]


def _delivery_jobs(app) -> list[Job]:
    with app.state.session_factory() as session:
        return [j for j in job_store.recent_jobs(session, 1000) if j.kind == alert_service.KIND]


def _instant(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def test_an_admin_registers_a_webhook_and_an_outside_shot_is_delivered_as_json(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver() as receiver:
        target = _register(client, campaign, admin_headers, receiver.url, statuses=["outside"])
        assert target["statuses"] == ["outside"] and target["flags"] == [] and target["url"] == receiver.url
        listed = client.get(_hooks(campaign), headers=admin_headers).json()["items"]
        assert [t["id"] for t in listed] == [target["id"]]

        stored = _post(client, campaign, ingest_headers, make_shot("ex-2"))  # an outside shot
        assert stored["evaluation"]["status"] == "outside"
        assert receiver.received == []  # nothing is sent from the request
        assert run_queued_jobs(app) == 1  # what a worker process does

        [request] = receiver.wait_for(1)
    assert request.path == "/alerts"
    assert request.headers["Content-Type"] == "application/json"
    body = request.body
    assert body["event"] == "shot.stored"
    assert (body["campaign"], body["shot_id"], body["revision"], body["status"]) == (campaign, "ex-2", 1, "outside")
    assert body["link"] == f"{PUBLIC_URL}/campaigns/{campaign}/shots/ex-2"
    assert body["model_version"] == model.MODEL_VERSION
    assert body["attempt"] == 1 and body["delivery_id"] == request.headers["X-Wakeledger-Delivery"]
    stored_flags = {f["code"]: f["message"] for f in stored["evaluation"]["flags"]}
    assert {f["code"]: f["sentence"] for f in body["flags"]} == stored_flags
    assert all(f["sentence"] and f["severity"] in model.SEVERITIES for f in body["flags"])
    assert "does not replace machine protection" in body["advisory"]

    [line] = _deliveries(client, campaign, admin_headers)
    assert (line["outcome"], line["status_code"], line["attempt"], line["shot_id"]) == ("delivered", 200, 1, "ex-2")
    assert line["target_id"] == target["id"] and line["error"] == ""
    [job] = _delivery_jobs(app)
    assert job.state == "succeeded"


def test_a_nominal_shot_fires_nothing_and_a_chosen_flag_fires_whatever_the_status(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver() as receiver:
        first = _register(client, campaign, admin_headers, receiver.url, statuses=["outside"])
        _post(client, campaign, ingest_headers, make_shot("ex-1"))  # nominal
        assert run_queued_jobs(app) == 0 and _delivery_jobs(app) == []

        ex2 = make_shot("ex-2", shot_id="flagged-1")
        flagged = _post(client, campaign, ingest_headers, ex2)
        code = flagged["evaluation"]["flags"][0]["code"]
        client.delete(f"{_hooks(campaign)}/{first['id']}", headers=admin_headers)
        by_flag = _register(client, campaign, admin_headers, receiver.url, statuses=[], flags=[code])
        _post(client, campaign, ingest_headers, make_shot("ex-2", shot_id="flagged-2"))
        run_queued_jobs(app)
        [request] = receiver.wait_for(1)
    assert request.body["shot_id"] == "flagged-2"
    assert code in {f["code"] for f in request.body["flags"]}
    assert by_flag["statuses"] == [] and by_flag["flags"] == [code]


def test_a_failing_receiver_is_retried_with_exponential_backoff_and_every_attempt_is_logged(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    clock = TestClock()
    with alert_receiver(answers=[503]) as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        _post(client, campaign, ingest_headers, make_shot("ex-2"))
        for attempt in range(1, 6):
            assert run_queued_jobs(app, clock) == 1, attempt
            assert run_queued_jobs(app, clock) == 0  # waiting out the backoff: not sent again yet
            if attempt < 5:
                [latest, *_] = _deliveries(client, campaign, admin_headers)
                assert latest["outcome"] == "retrying" and latest["status_code"] == 503
                clock.advance_to(_instant(latest["next_attempt_at"]))
        requests = receiver.wait_for(5)
    assert [r.body["attempt"] for r in requests] == [1, 2, 3, 4, 5]
    assert len({r.headers["X-Wakeledger-Delivery"] for r in requests}) == 1  # one delivery, five attempts

    lines = list(reversed(_deliveries(client, campaign, admin_headers)))
    assert [line["attempt"] for line in lines] == [1, 2, 3, 4, 5]
    assert [line["outcome"] for line in lines] == ["retrying"] * 4 + ["failed"]
    assert all(line["status_code"] == 503 and "503" in line["error"] for line in lines)
    waits = [_instant(b["at"]) - _instant(a["at"]) for a, b in zip(lines, lines[1:], strict=False)]
    assert waits == [timedelta(seconds=s) for s in (10, 20, 40, 80)]
    [job] = _delivery_jobs(app)
    assert job.state == "failed" and "503" in job.message and job.attempts == 5


def test_a_receiver_that_recovers_gets_the_alert_on_a_later_attempt(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    clock = TestClock()
    with alert_receiver(answers=[500, 200]) as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        _post(client, campaign, ingest_headers, make_shot("ex-2"))
        run_queued_jobs(app, clock)
        clock.advance_to(clock.now + timedelta(seconds=10))
        assert run_queued_jobs(app, clock) == 1
        receiver.wait_for(2)
    lines = _deliveries(client, campaign, admin_headers)
    assert [(line["attempt"], line["outcome"], line["status_code"]) for line in lines] == [
        (2, "delivered", 200),
        (1, "retrying", 500),
    ]


def test_a_receiver_that_refuses_the_alert_with_a_4xx_is_not_retried(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver(answers=[404]) as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        _post(client, campaign, ingest_headers, make_shot("ex-2"))
        run_queued_jobs(app, lambda: job_store.now() + timedelta(days=1))
        receiver.wait_for(1)
    [line] = _deliveries(client, campaign, admin_headers)
    assert (line["outcome"], line["status_code"]) == ("failed", 404)
    assert "not retried" in _delivery_jobs(app)[0].message


def test_a_receiver_nobody_listens_on_is_logged_as_an_error_without_a_status(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver() as receiver:
        url = receiver.url
    _register(client, campaign, admin_headers, url)  # the receiver has gone: connection refused
    _post(client, campaign, ingest_headers, make_shot("ex-2"))
    run_queued_jobs(app)
    [line] = _deliveries(client, campaign, admin_headers)
    assert line["outcome"] == "retrying" and line["status_code"] is None and line["error"]


def test_a_viewer_or_an_ingester_may_not_see_or_change_webhooks(
    client, campaign, viewer_headers, ingest_headers, admin_headers
):
    for headers in (viewer_headers, ingest_headers):
        assert client.get(_hooks(campaign), headers=headers).status_code == 403
        refused = client.post(_hooks(campaign), json={"url": "http://127.0.0.1:9/a"}, headers=headers)
        assert refused.status_code == 403
        assert client.delete(_hooks(campaign) + "/1", headers=headers).status_code == 403
    assert client.get(_hooks(campaign), headers=admin_headers).json()["items"] == []


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({"url": "ftp://127.0.0.1/alerts"}, "url"),
        ({"url": "not a url"}, "url"),
        ({"url": "http://"}, "url"),
        ({"url": "http://127.0.0.1:99999/alerts"}, "url"),
        ({"url": ""}, "url"),
        ({"url": 5}, "url"),
        ({}, "url"),
        ({"url": "http://127.0.0.1/a", "statuses": ["outside", "bad"]}, "statuses.1"),
        ({"url": "http://127.0.0.1/a", "flags": ["NOT_A_RULE"]}, "flags.0"),
        ({"url": "http://127.0.0.1/a", "statuses": [], "flags": []}, "statuses"),
        ({"url": "http://127.0.0.1/a", "colour": "red"}, "colour"),
    ],
)
def test_a_bad_webhook_gets_a_422_naming_the_field_and_nothing_is_stored(client, campaign, admin_headers, body, field):
    response = client.post(_hooks(campaign), json=body, headers=admin_headers)
    assert response.status_code == 422, response.text
    assert field in [e["field"] for e in response.json()["errors"]], response.json()
    assert client.get(_hooks(campaign), headers=admin_headers).json()["items"] == []


def test_any_http_host_an_admin_names_is_accepted_loopback_included(client, campaign, admin_headers):
    for url in (
        "http://localhost:8080/hook",
        "https://[::1]:9443/x",
        "http://127.0.0.1/",
        "https://alerts.invalid/a?b=c",
    ):
        _register(client, campaign, admin_headers, url)
    assert len(client.get(_hooks(campaign), headers=admin_headers).json()["items"]) == 4


def test_adding_and_deleting_a_webhook_is_audited_and_a_deleted_target_receives_nothing(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver() as receiver:
        target = _register(client, campaign, admin_headers, receiver.url)
        _post(client, campaign, ingest_headers, make_shot("ex-2"))  # queued, not yet sent
        removed = client.delete(f"{_hooks(campaign)}/{target['id']}", headers=admin_headers)
        assert removed.status_code == 200 and removed.json()["id"] == target["id"]
        assert client.delete(f"{_hooks(campaign)}/{target['id']}", headers=admin_headers).status_code == 404
        _post(client, campaign, ingest_headers, make_shot("ex-3"))
        run_queued_jobs(app)
        assert receiver.received == []
    [line] = _deliveries(client, campaign, admin_headers)
    assert (line["outcome"], line["shot_id"], line["target_url"]) == ("skipped", "ex-2", receiver.url)
    with app.state.session_factory() as session:
        actions = [e.action for e in session.query(AuditEntry).filter(AuditEntry.action.startswith("alerts."))]
    assert actions == ["alerts.target.add", "alerts.target.delete"]


def test_a_correction_fires_with_its_revision_and_a_reevaluation_fires_nothing(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    _post(client, campaign, ingest_headers, make_shot("ex-1", shot_id="s-1"))  # nominal
    with alert_receiver() as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        corrected = make_shot("ex-2", shot_id="s-1")
        response = client.put(
            f"/api/v1/campaigns/{campaign}/shots/s-1?reason=unit fix", json=corrected, headers=ingest_headers
        )
        assert response.status_code == 200 and response.json()["evaluation"]["status"] == "outside"
        run_queued_jobs(app)
        [request] = receiver.wait_for(1)
        assert (request.body["event"], request.body["revision"]) == ("shot.corrected", 2)

        patched = client.patch(
            f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": 0.002}, headers=admin_headers
        )
        assert patched.status_code == 202
        run_queued_jobs(app)  # the re-evaluation
        assert len(receiver.received) == 1


def test_a_batch_queues_at_most_the_per_request_number_of_alerts_and_logs_the_rest(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    with alert_receiver() as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        shots = [make_shot("ex-2", shot_id=f"b-{i}", taken_at=f"2026-11-17T10:00:{i:02d}Z") for i in range(5)]
        response = client.post(
            f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers
        )
        assert response.status_code == 201
        assert len(_delivery_jobs(app)) == 3  # alerts_per_request
        run_queued_jobs(app)
        receiver.wait_for(3)
    lines = _deliveries(client, campaign, admin_headers)
    assert sorted(line["outcome"] for line in lines) == ["delivered"] * 3 + ["skipped"]
    [skipped] = [line for line in lines if line["outcome"] == "skipped"]
    assert "2 more matching shot(s)" in skipped["error"]


def test_queued_deliveries_do_not_count_against_the_campaigns_job_limit(
    client, app, campaign, admin_headers, ingest_headers, make_shot
):
    _register(client, campaign, admin_headers, "http://127.0.0.1:9/never-read")
    shots = [make_shot("ex-2", shot_id=f"q-{i}", taken_at=f"2026-11-17T10:00:{i:02d}Z") for i in range(3)]
    client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    assert len(_delivery_jobs(app)) == 3  # more than max_jobs_per_campaign (2)
    runs = f"/api/v1/campaigns/{campaign}/shots/q-0/detailed-runs"
    response = client.post(runs, json={"slices_per_wavelength": 16}, headers=ingest_headers)
    assert response.status_code == 202, response.text


def test_ingest_answers_while_the_receiver_is_still_holding_an_alert(
    client, app, campaign, admin_headers, ingest_headers, make_shot, job_worker
):
    with alert_receiver() as receiver:
        _register(client, campaign, admin_headers, receiver.url)
        receiver.hold()  # the receiver keeps every request open until released
        job_worker()
        _post(client, campaign, ingest_headers, make_shot("ex-2", shot_id="first"))
        receiver.wait_for(1, timeout_s=120)  # a worker is now waiting on the receiver
        second = client.post(
            f"/api/v1/campaigns/{campaign}/shots", json=make_shot("ex-3", shot_id="second"), headers=ingest_headers
        )
        assert second.status_code == 201  # answered while the receiver still holds the first alert
        assert [r.body["shot_id"] for r in receiver.received] == ["first"]
        receiver.release()
        requests = receiver.wait_for(2, timeout_s=120)
    assert sorted(r.body["shot_id"] for r in requests) == ["first", "second"]
