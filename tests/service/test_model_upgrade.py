"""After an upgrade that changes model.MODEL_VERSION, stored shots are re-evaluated:
at server start-up in a background job, or now with ``wakeledger reevaluate``."""

from __future__ import annotations

from sqlalchemy import select, update

import model
from app.cli import main
from app.database import make_session_factory
from app.tables import AuditEntry, Campaign, Evaluation, Job
from tests.support.jobs import wait_for_job

OLD_VERSION = "2000.1.0"  # a model version no release carries


def _post_shots(client, headers, campaign: str, make_shot, n: int, prefix: str) -> None:
    shots = [make_shot(i % 3, shot_id=f"{prefix}-{i}", taken_at=f"2026-11-17T10:00:{i:02d}Z") for i in range(n)]
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=headers)
    assert response.status_code in (200, 201, 207), response.text


def _make_campaign(client, headers, slug: str) -> None:
    response = client.post("/api/v1/campaigns", json={"slug": slug, "name": slug, "timezone": "UTC"}, headers=headers)
    assert response.status_code == 201, response.text


def _age_evaluations(factory, slug: str, version: str = OLD_VERSION) -> None:
    """Pretend the campaign's shots were evaluated by an older release of the model."""
    with factory() as session, session.begin():
        campaign_id = session.scalar(select(Campaign.id).where(Campaign.slug == slug))
        session.execute(update(Evaluation).where(Evaluation.campaign_id == campaign_id).values(model_version=version))


def _model_versions(factory, slug: str) -> set[str]:
    with factory() as session:
        campaign_id = session.scalar(select(Campaign.id).where(Campaign.slug == slug))
        return set(session.scalars(select(Evaluation.model_version).where(Evaluation.campaign_id == campaign_id)))


def _reevaluation_jobs(factory, slug: str) -> list[Job]:
    with factory() as session:
        return list(
            session.scalars(
                select(Job)
                .join(Campaign, Campaign.id == Job.campaign_id)
                .where(Campaign.slug == slug, Job.kind == "reevaluate")
                .order_by(Job.created_at)
            )
        )


def _start_again(settings):
    """A new process of the same service (its lifespan runs on entering the TestClient)."""
    from starlette.testclient import TestClient

    from app.main import create_app

    return create_app(settings), TestClient


def test_a_campaign_evaluated_by_an_older_model_is_re_evaluated_when_the_service_starts(
    app, settings, client, admin_headers, ingest_headers, viewer_headers, campaign, make_shot
):
    _post_shots(client, ingest_headers, campaign, make_shot, 12, "old")
    factory = app.state.session_factory
    _age_evaluations(factory, campaign)
    assert _model_versions(factory, campaign) == {OLD_VERSION}

    restarted, test_client = _start_again(settings)
    try:
        with test_client(restarted) as again:
            [job] = _reevaluation_jobs(factory, campaign)
            finished = wait_for_job(again, job.id, viewer_headers, timeout_s=20)
    finally:
        restarted.state.engine.dispose()
    assert finished["state"] == "succeeded", finished
    assert (finished["done"], finished["total"], finished["result"]["reevaluated"]) == (12, 12, 12)
    assert _model_versions(factory, campaign) == {model.MODEL_VERSION}
    with factory() as session:
        entries = list(session.scalars(select(AuditEntry).where(AuditEntry.action == "campaign.reevaluate")))
    assert [(e.actor, e.campaign_slug, e.detail["job"]) for e in entries] == [
        ("wakeledger (model upgrade)", campaign, job.id)
    ]


def test_a_campaign_already_on_the_current_model_gets_no_job_at_start_up(
    app, settings, client, admin_headers, ingest_headers, viewer_headers, campaign, make_shot
):
    _make_campaign(client, admin_headers, "current")
    _post_shots(client, ingest_headers, campaign, make_shot, 3, "old")
    _post_shots(client, ingest_headers, "current", make_shot, 3, "new")
    factory = app.state.session_factory
    _age_evaluations(factory, campaign)

    restarted, test_client = _start_again(settings)
    try:
        with test_client(restarted) as again:
            [job] = _reevaluation_jobs(factory, campaign)
            wait_for_job(again, job.id, viewer_headers, timeout_s=20)
    finally:
        restarted.state.engine.dispose()
    assert _reevaluation_jobs(factory, "current") == []
    assert _model_versions(factory, "current") == {model.MODEL_VERSION}
    assert _model_versions(factory, campaign) == {model.MODEL_VERSION}


def test_start_up_queues_no_second_job_when_a_re_evaluation_is_already_queued(
    app, settings, client, ingest_headers, viewer_headers, campaign, make_shot
):
    from app.services.campaign_settings import change_settings

    _post_shots(client, ingest_headers, campaign, make_shot, 4, "old")
    factory = app.state.session_factory
    _age_evaluations(factory, campaign)
    # A settings change commits its job in a process that "dies" before running it: its
    # sessions have no job runner attached, so the job stays queued.
    with make_session_factory(app.state.engine)() as session:
        _campaign, queued = change_settings(session, campaign, {"noise_floor": 0.002}, "test")

    restarted, test_client = _start_again(settings)
    try:
        with test_client(restarted) as again:
            finished = wait_for_job(again, queued.id, viewer_headers, timeout_s=20)
    finally:
        restarted.state.engine.dispose()
    assert [j.id for j in _reevaluation_jobs(factory, campaign)] == [queued.id]
    assert finished["result"]["reevaluated"] == 4  # the resumed job also covers the older model's shots
    assert _model_versions(factory, campaign) == {model.MODEL_VERSION}


def test_the_reevaluate_command_re_evaluates_the_campaign_in_the_foreground_and_exits_0(
    app, database_url, client, ingest_headers, campaign, make_shot, capsys
):
    _post_shots(client, ingest_headers, campaign, make_shot, 6, "old")
    factory = app.state.session_factory
    _age_evaluations(factory, campaign)

    assert main(["--database-url", database_url, "reevaluate", "--campaign", campaign]) == 0
    assert f"re-evaluated 6 shots of {campaign}" in capsys.readouterr().err
    assert _model_versions(factory, campaign) == {model.MODEL_VERSION}
    with factory() as session:
        entry = session.scalar(select(AuditEntry).where(AuditEntry.action == "campaign.reevaluate"))
    assert (entry.actor, entry.campaign_slug, entry.detail["reevaluated"]) == ("cli", campaign, 6)

    assert main(["--database-url", database_url, "reevaluate", "--campaign", campaign]) == 0  # nothing left
    assert f"re-evaluated 0 shots of {campaign}" in capsys.readouterr().err


def test_the_reevaluate_command_names_an_unknown_campaign_and_exits_non_zero(database_url, capsys):
    assert main(["--database-url", database_url, "reevaluate", "--campaign", "no-such-campaign"]) == 1
    assert "campaign 'no-such-campaign' does not exist" in capsys.readouterr().err
