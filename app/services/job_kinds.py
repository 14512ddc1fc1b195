"""Every kind of background job, by name: the mapping a job runner is given.

Listed here, explicitly, so that ``app.services.jobs`` stays infrastructure and any
runner (the server's threads today, a worker process later) knows every kind.
"""

from __future__ import annotations

from app.services import reevaluation
from app.services.detailed_runs import lifecycle as detailed_runs
from app.services.jobs import JobRun

KINDS: dict[str, JobRun] = {
    reevaluation.KIND: reevaluation.run_job,
    detailed_runs.RUN_KIND: detailed_runs.run_detailed_job,
}
