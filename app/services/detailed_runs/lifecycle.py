"""The life of a detailed envelope run (model.envelope, MODEL.md section 10) of a stored shot.

A run is a background job (kind ``detailed_run``) that solves the shot revision current
when it was asked for, with the campaign's settings of that moment, and stores the JSON
result in one transaction at the end: a failed run stores nothing. While it solves, the
job keeps the solver's state as its checkpoint (every ``ctx.checkpoint_interval_s``), so
a run whose worker died carries on from there, to the same result. This module starts
runs, is the job, and reads stored runs back (with their figures, for the shot page).
"""

from __future__ import annotations

import io
import math
import time
from collections.abc import Callable, Mapping
from datetime import UTC, datetime
from typing import Any
from urllib.parse import quote

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError
from sqlalchemy.orm import Session

import model
from app.database import begin_write, run_write
from app.errors import FieldProblem, InvalidInput, NotFound
from app.schemas import pydantic_problems
from app.services import jobs
from app.services.auth import TokenInfo
from app.services.campaigns import require_campaign
from app.services.detailed_runs.figures import CHART_TITLES, run_facts, run_figures
from app.store import audit
from app.store import detailed_runs as run_store
from app.store import shots as shot_store
from app.tables import Campaign, DetailedRun, Job, Shot
from app.times import format_utc
from model import envelope

RUN_KIND = "detailed_run"
MAX_SLICES_PER_WAVELENGTH = 128  # 8x the default grid: a run stays within minutes
PROGRESS_INTERVAL_S = 0.5  # the job row is written at most this often while the solver runs


class RunParameters(BaseModel):
    """What a caller may choose for one run (the API body and the CLI options)."""

    model_config = ConfigDict(extra="forbid")

    slices_per_wavelength: int = Field(
        default=16,
        ge=16,
        le=MAX_SLICES_PER_WAVELENGTH,
        strict=True,
        description="slices per plasma wavelength (at least 16)",
    )
    dz_m: float | None = Field(
        default=None,
        gt=0,
        allow_inf_nan=False,
        strict=True,
        description="integration step along the plasma [m]; default: the solver's choice",
    )
    stop_after_saturation: bool = Field(
        default=True,
        strict=True,
        description=(
            f"end the run {envelope.STOP_AFTER_SATURATION_M:g} m past the saturation point (beyond it the "
            "envelope model is qualitative); false integrates to the plasma exit"
        ),
    )

    @property
    def stop_after_saturation_m(self) -> float | None:
        return stop_distance(self.stop_after_saturation)


def stop_distance(stop_after_saturation: bool) -> float | None:
    """The solver's stop distance past saturation for the run option (None: to the plasma exit)."""
    return envelope.STOP_AFTER_SATURATION_M if stop_after_saturation else None


def parse_parameters(raw: Mapping[str, Any] | None) -> RunParameters:
    """RunParameters from plain values, or a 422 naming each failing field."""
    try:
        return RunParameters.model_validate(dict(raw or {}))
    except ValidationError as exc:
        raise InvalidInput(pydantic_problems(exc.errors())) from None


def step_problems(params: RunParameters, plasma_length_m: float) -> list[FieldProblem]:
    """A requested step must keep the run within the solver's step limit (model.envelope.MAX_STEPS)."""
    if params.dz_m is None:
        return []
    ratio = plasma_length_m / params.dz_m  # a subnormal dz_m makes this infinite
    steps = math.ceil(ratio - 1e-9) if math.isfinite(ratio) else math.inf
    if steps > envelope.MAX_STEPS:
        return [
            (
                "dz_m",
                f"{plasma_length_m:g} m of plasma in steps of {params.dz_m:g} m is {steps:.4g} steps; "
                f"the solver takes at most {envelope.MAX_STEPS} "
                f"(use dz_m >= {plasma_length_m / envelope.MAX_STEPS:.3g})",
            )
        ]
    return []


# ----------------------------------------------------------------------------- starting


def _shot_or_404(session: Session, campaign: Campaign, shot_id: str) -> Shot:
    shot = shot_store.get_shot(session, campaign.id, shot_id)
    if shot is None:
        raise NotFound(f"shot {shot_id!r} in campaign {campaign.slug!r}")
    return shot


def _same_request(a: Mapping[str, Any], b: Mapping[str, Any]) -> bool:
    keys = ("shot_pk", "shot_revision", "slices_per_wavelength", "dz_m", "settings_version")
    return all(a.get(k) == b.get(k) for k in keys) and a.get("stop_after_saturation", True) == b.get(
        "stop_after_saturation", True
    )


def start_run(
    session: Session,
    slug: str,
    shot_id: str,
    params: RunParameters,
    who: TokenInfo,
    limits: jobs.JobLimits = jobs.NO_LIMITS,
) -> Job:
    """Queue a run of the shot's current revision. Asked again while an identical run is still
    queued or running, it returns that job instead of starting a second one; past the queue
    limits of the campaign or of the token, TooManyJobs."""
    actor = who.actor

    def work() -> Job:
        begin_write(session)
        campaign = require_campaign(session, slug)
        shot = _shot_or_404(session, campaign, shot_id)
        problems = step_problems(params, shot.plasma_length_m)
        if problems:
            raise InvalidInput(problems)
        wanted = {
            "shot_pk": shot.id,
            "shot_id": shot.shot_id,
            "shot_revision": shot.revision,
            "slices_per_wavelength": params.slices_per_wavelength,
            "dz_m": params.dz_m,
            "stop_after_saturation": params.stop_after_saturation,
            "settings_version": campaign.settings_version,
            "settings": dict(campaign.model_settings or {}),
        }
        for job in run_store.unfinished_jobs(session, RUN_KIND, campaign.id):
            if _same_request(jobs.job_params(job), wanted):
                return job
        job = jobs.queue_job(session, RUN_KIND, campaign.id, wanted, submitter=who, limits=limits)
        audit.record(
            session,
            actor,
            "detailed_run.start",
            campaign_slug=slug,
            target=shot.shot_id,
            detail={"job_id": job.id, **{k: v for k, v in wanted.items() if k != "settings"}},
        )
        return job

    return run_write(session, work)


# ------------------------------------------------------------------------------ the job


class JobProgress:
    """The solver's progress fraction as the job's done/total in percent, written at most every interval."""

    def __init__(
        self,
        report: jobs.Progress,
        interval_s: float = PROGRESS_INTERVAL_S,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.report, self.interval_s, self.clock = report, interval_s, clock
        self.last_percent, self.last_at = -1, -math.inf

    def __call__(self, fraction: float) -> None:
        percent = min(100, max(0, int(fraction * 100)))
        now = self.clock()
        if percent <= self.last_percent or (percent < 100 and now - self.last_at < self.interval_s):
            return
        self.last_percent, self.last_at = percent, now
        self.report(percent, 100, f"solving the envelope equations: {percent} %")


_STATE_ARRAYS = ("x", "y", "vx", "vy", "modulation", "sigma_stored", "phase_steps")
_STATE_NUMBERS = ("step", "n_steps", "next_store")


def state_bytes(state: envelope.EnvelopeState) -> bytes:
    """The solver's state as a job checkpoint (numpy's npz: exact floats)."""
    out = io.BytesIO()
    arrays: dict[str, Any] = {name: getattr(state, name) for name in _STATE_ARRAYS}
    arrays.update({name: np.array(getattr(state, name)) for name in _STATE_NUMBERS})
    np.savez(out, **arrays)
    return out.getvalue()


def state_of(data: bytes) -> envelope.EnvelopeState:
    with np.load(io.BytesIO(data)) as saved:
        return envelope.EnvelopeState(
            step=int(saved["step"]),
            n_steps=int(saved["n_steps"]),
            next_store=int(saved["next_store"]),
            **{name: saved[name] for name in _STATE_ARRAYS},
        )


def run_detailed_job(ctx: jobs.JobContext) -> dict[str, Any]:
    """Solve (from the checkpoint, if an earlier attempt kept one), then store the result in
    one transaction. Safe to restart: a stored run is not stored twice."""
    job_id, p, factory, progress = ctx.job_id, ctx.params, ctx.factory, ctx.progress
    with factory() as session:
        stored = run_store.run_id_for_job(session, job_id)
        payload = run_store.revision_payload(session, p["shot_pk"], p["shot_revision"]) if stored is None else None
    if stored is not None:
        return {"run_id": stored, "shot_id": p["shot_id"]}
    if payload is None:
        raise LookupError(f"shot {p['shot_id']!r} revision {p['shot_revision']} no longer exists")
    resume = state_of(ctx.checkpoint) if ctx.checkpoint else None
    progress(ctx.done if resume else 0, 100, f"resuming at step {resume.step}" if resume else "setting up the slices")
    last_saved = [time.monotonic()]

    def keep(state: envelope.EnvelopeState) -> None:
        if time.monotonic() - last_saved[0] >= ctx.checkpoint_interval_s:
            ctx.save_checkpoint(state_bytes(state))
            last_saved[0] = time.monotonic()

    reported = JobProgress(progress)
    stop = stop_distance(bool(p.get("stop_after_saturation", True)))  # jobs queued before the option: on
    if resume is not None:
        reported.last_percent = ctx.done - 1  # a resumed run reports on from where it was
    try:
        result = envelope.simulate_envelope(
            payload,
            p["settings"],
            p["slices_per_wavelength"],
            p["dz_m"],
            progress=reported,
            resume=resume,
            checkpoint=keep,
            stop_after_saturation_m=stop,
        )
    except ValueError:
        if resume is None:
            raise
        result = envelope.simulate_envelope(  # a checkpoint of another grid: solve from the start
            payload,
            p["settings"],
            p["slices_per_wavelength"],
            p["dz_m"],
            progress=JobProgress(progress),
            checkpoint=keep,
            stop_after_saturation_m=stop,
        )
        resume = None
    progress(100, 100, "storing the result")
    document = envelope.envelope_result_to_json(result)
    with factory() as session:
        begin_write(session)
        run = run_store.add_run(
            session,
            DetailedRun(
                shot_pk=p["shot_pk"],
                job_id=job_id,
                shot_revision=p["shot_revision"],
                model_version=model.MODEL_VERSION,
                parameters={
                    **{k: p[k] for k in ("slices_per_wavelength", "dz_m", "settings_version", "settings")},
                    "stop_after_saturation": bool(p.get("stop_after_saturation", True)),
                },
                result=document,
                created_at=datetime.now(UTC),
            ),
        )
        run_id = run.id
        session.commit()
    return {
        "run_id": run_id,
        "shot_id": p["shot_id"],
        "valid_until_m": document["valid_until_m"],
        "resumed_from_step": resume.step if resume is not None else None,
    }


# ----------------------------------------------------------------------------- reading


def runs_url(slug: str, shot_id: str) -> str:
    return f"/api/v1/campaigns/{quote(slug, safe='')}/shots/{quote(shot_id, safe='')}/detailed-runs"


def run_meta(run: DetailedRun, shot: Shot, slug: str) -> dict[str, Any]:
    """A run without its result: what was solved, with which numerics, and where to read it."""
    url = f"{runs_url(slug, shot.shot_id)}/{run.id}"
    return {
        "id": run.id,
        "shot_id": shot.shot_id,
        "shot_revision": run.shot_revision,
        "shot_current_revision": shot.revision,
        "model_version": run.model_version,
        "parameters": run.parameters,
        "job_id": run.job_id,
        "created_at": format_utc(run.created_at),
        "url": url,
        "figures_url": f"{url}/figures",
    }


def _campaign_and_shot(session: Session, slug: str, shot_id: str) -> tuple[Campaign, Shot]:
    campaign = require_campaign(session, slug)
    return campaign, _shot_or_404(session, campaign, shot_id)


def list_runs(session: Session, slug: str, shot_id: str) -> list[dict[str, Any]]:
    _campaign, shot = _campaign_and_shot(session, slug, shot_id)
    return [run_meta(r, shot, slug) for r in run_store.list_runs(session, shot.id)]


def _run_or_404(session: Session, slug: str, shot_id: str, run_id: int) -> tuple[DetailedRun, Shot]:
    _campaign, shot = _campaign_and_shot(session, slug, shot_id)
    run = run_store.get_run(session, shot.id, run_id)
    if run is None:
        raise NotFound(f"detailed run {run_id} of shot {shot_id!r}")
    return run, shot


def get_run(session: Session, slug: str, shot_id: str, run_id: int) -> dict[str, Any]:
    run, shot = _run_or_404(session, slug, shot_id, run_id)
    return {**run_meta(run, shot, slug), "result": run.result}


def run_view(session: Session, slug: str, shot_id: str, run_id: int) -> dict[str, Any]:
    run, shot = _run_or_404(session, slug, shot_id, run_id)
    return panel_view(run, shot, slug)


def panel_view(run: DetailedRun, shot: Shot, slug: str) -> dict[str, Any]:
    """What the shot page shows of one run: its metadata, key numbers, validity note and charts."""
    doc = run.result
    meta = run_meta(run, shot, slug)
    stale = run.shot_revision != shot.revision
    return {
        "run": meta,
        "stale_note": (
            f"This run solved revision {run.shot_revision}; the shot is now at revision {shot.revision}."
            if stale
            else ""
        ),
        "validity_note": doc.get("validity_note") or "",
        "facts": run_facts(doc, run),
        "figures": run_figures(doc),
    }


def shot_panel(session: Session, campaign: Campaign, shot: Shot) -> dict[str, Any]:
    """The shot page's detailed-run panel: the latest stored run (if any) and a run still in progress."""
    latest = run_store.latest_run(session, shot.id)
    view, problem = None, ""
    if latest is not None:
        try:
            view = panel_view(latest, shot, campaign.slug)
        except Exception as exc:  # an unreadable stored run must not break the shot page
            problem = f"The latest detailed run could not be drawn ({type(exc).__name__}: {exc})."
    pending = next(
        (
            j.id
            for j in run_store.unfinished_jobs(session, RUN_KIND, campaign.id)
            if jobs.job_params(j).get("shot_pk") == shot.id
        ),
        None,
    )
    return {
        "latest": view,
        "problem": problem,
        "titles": CHART_TITLES,
        "config": {
            "runs_url": runs_url(campaign.slug, shot.shot_id),
            "job_id": pending,
            "latest": view,
        },
    }
