"""Re-evaluation of stored shots, in one place: the "reevaluate" job kind, queueing it
(after a settings change, or for every campaign a model upgrade left behind), the chunk
loop it runs, and running it now in the foreground (``wakeledger reevaluate``).

A shot is stale when its evaluation was made with older campaign settings or by another
``model.MODEL_VERSION``. Each chunk is its own transaction under the campaign's writer
lock, so ingest carries on between chunks and a restarted job picks up where it stopped.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

import model
from app.database import begin_write, run_write
from app.services import jobs, metrics
from app.services.campaigns import campaign_lock, require_campaign
from app.services.ingest.evaluation import evaluate_inputs, evaluation_rows, model_columns
from app.store import audit
from app.store import campaigns as campaign_store
from app.store import jobs as job_store
from app.store import shots as shot_store
from app.tables import Job

KIND = "reevaluate"
CHUNK = 2000
MODEL_UPGRADE_ACTOR = "wakeledger (model upgrade)"


def queue(session: Session, campaign_id: int, settings_version: int, actor: str = "") -> Job:
    """Queue the campaign's re-evaluation in the caller's transaction (a worker starts it once
    it commits). A re-evaluation still queued is that job: it reads the campaign's current
    settings when it runs. (A running one may be past its last chunk, so a new one is queued.)"""
    waiting = job_store.unfinished_job(session, KIND, campaign_id)
    if waiting is not None and waiting.state == "queued":
        return waiting
    return jobs.queue_job(session, KIND, campaign_id, {"settings_version": settings_version}, actor=actor)


def queue_model_upgrades(session: Session, actor: str = MODEL_UPGRADE_ACTOR) -> list[str]:
    """Queue the re-evaluation of every campaign holding evaluations by another model
    version, unless one is already queued or running; returns the new job ids."""
    ids = shot_store.campaign_ids_evaluated_by_other_model(session, model.MODEL_VERSION)
    campaigns = [(c.id, c.slug) for c in (campaign_store.get_campaign_by_id(session, i) for i in ids) if c is not None]
    session.rollback()  # end the read: each write below begins with its campaign's writer lock
    queued: list[str] = []
    for campaign_id, slug in campaigns:

        def work(campaign_id: int = campaign_id, slug: str = slug) -> Job | None:
            # Under the campaign lock, so two processes starting at once queue one job.
            begin_write(session, campaign_lock(slug))
            if job_store.has_unfinished_job(session, KIND, campaign_id):
                return None
            # Read again under the lock: a job resumed at start-up may have finished since the read above.
            if campaign_id not in shot_store.campaign_ids_evaluated_by_other_model(session, model.MODEL_VERSION):
                return None
            current = campaign_store.get_campaign_by_id(session, campaign_id)
            if current is None:
                return None
            job = queue(session, campaign_id, current.settings_version, actor)
            audit.record(
                session,
                actor,
                "campaign.reevaluate",
                campaign_slug=slug,
                target=slug,
                detail={"reason": "model upgrade", "model_version": model.MODEL_VERSION, "job": job.id},
            )
            return job

        job = run_write(session, work)
        if job is not None:
            queued.append(job.id)
    return queued


def count_stale(session: Session, campaign_slug: str) -> int:
    """Shots of the campaign evaluated with older settings or by another model version."""
    campaign = require_campaign(session, campaign_slug)
    return shot_store.count_stale(session, campaign.id, campaign.settings_version, model.MODEL_VERSION)


def reevaluate_stale_chunk(session: Session, campaign_slug: str, chunk: int = CHUNK) -> int:
    """Re-evaluate up to ``chunk`` stale shots in one transaction; returns how many."""

    def work() -> int:
        begin_write(session, campaign_lock(campaign_slug))
        campaign = require_campaign(session, campaign_slug)
        pks, stored = shot_store.stale_inputs(
            session, campaign.id, campaign.settings_version, model.MODEL_VERSION, chunk
        )
        if not pks:
            return 0
        table = evaluate_inputs(model_columns(stored), campaign.model_settings or {}, "reevaluate")
        evals, flags = evaluation_rows(table, pks, campaign.id, campaign.settings_version, datetime.now(UTC))
        shot_store.replace_evaluations(session, evals, flags)
        return len(pks)

    n = run_write(session, work)
    metrics.SHOTS_REEVALUATED.inc(n)
    return n


def reevaluate_campaign(
    factory: sessionmaker[Session], campaign_slug: str, progress: jobs.Progress, done: int = 0, total: int = 0
) -> int:
    """Re-evaluate every stale shot of the campaign, chunk by chunk; returns how many in all.

    ``done`` and ``total``: the progress of an earlier attempt of the same job (a resumed
    job keeps its total: the chunks already done are no longer stale).
    """
    with factory() as session:
        total = max(total, done + count_stale(session, campaign_slug))
    progress(done, total, f"re-evaluating {total - done} shots" if not done else f"resumed at {done} of {total} shots")
    while True:
        with factory() as session:
            n = reevaluate_stale_chunk(session, campaign_slug)
        if n == 0:
            return done
        done += n
        total = max(total, done)
        progress(done, total, f"re-evaluated {done} of {total} shots")


def run_job(ctx: jobs.JobContext) -> dict[str, Any]:
    """The "reevaluate" job: every stale shot of the job's campaign. Its checkpoint is the
    stored evaluations themselves: each chunk commits, so a resumed job re-evaluates only
    what is still stale."""
    with ctx.factory() as session:
        campaign = campaign_store.get_campaign_by_id(session, ctx.campaign_id) if ctx.campaign_id else None
        if campaign is None:
            raise LookupError(f"job {ctx.job_id} names no campaign")
        slug = campaign.slug
    return {"reevaluated": reevaluate_campaign(ctx.factory, slug, ctx.progress, ctx.done, ctx.total)}


def run_now(factory: sessionmaker[Session], slug: str, actor: str, progress: jobs.Progress) -> int:
    """Re-evaluate the campaign in this thread (``wakeledger reevaluate``), audited;
    returns how many shots were re-evaluated."""
    done = reevaluate_campaign(factory, slug, progress)
    with factory() as session:

        def work() -> None:
            begin_write(session)
            audit.record(
                session,
                actor,
                "campaign.reevaluate",
                campaign_slug=slug,
                target=slug,
                detail={"reevaluated": done, "model_version": model.MODEL_VERSION},
            )

        run_write(session, work)
    return done
