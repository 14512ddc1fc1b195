"""Every kind of background job, by name: the mapping a worker is given.

Listed here, explicitly, so that ``app.services.jobs`` stays infrastructure and every
worker knows every kind. A new kind (e.g. delivering a webhook) is a function
``run(ctx: JobContext) -> dict`` (``app.services.jobs``) registered below under its
name, and queued with ``queue_job(session, NAME, campaign_id, params)``.
"""

from __future__ import annotations

from app.services import alerts, reevaluation
from app.services.detailed_runs import lifecycle as detailed_runs
from app.services.jobs import JobRun

KINDS: dict[str, JobRun] = {
    reevaluation.KIND: reevaluation.run_job,
    detailed_runs.RUN_KIND: detailed_runs.run_detailed_job,
    alerts.KIND: alerts.run_delivery,
}
