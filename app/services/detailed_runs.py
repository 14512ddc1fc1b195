"""Detailed envelope runs (model.envelope, MODEL.md section 10) of stored shots.

A run is a background job (kind ``detailed_run``) that solves the shot revision current
when it was asked for, with the campaign's settings of that moment, and stores the JSON
result in one transaction at the end: a failed run stores nothing. The three charts
(σ(ζ, z) map, δ(z) at the reference slice beside the closed form, E_z(ζ) at the exit) are
Plotly figure dicts built here once, for the shot page and for ``wakeledger simulate``'s
self-contained HTML file. Every chart marks where the envelope model stops being valid
(saturation) and carries the solver's own validity note.
"""

from __future__ import annotations

import math
import threading
import time
import warnings
from collections.abc import Callable, Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path
from typing import Any
from urllib.parse import quote

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError
from sqlalchemy.orm import Session, sessionmaker

import model
from app.database import begin_write, run_write
from app.problems import FieldProblem, invalid_input, not_found, pydantic_problems
from app.services import jobs
from app.services.campaigns import get_campaign_or_404
from app.services.charts import INK, OKABE_ITO, axis, layout
from app.services.export_formats import format_number
from app.services.files import write_atomically
from app.store import audit
from app.store import detailed_runs as run_store
from app.store import jobs as job_store
from app.store import shots as shot_store
from app.tables import Campaign, DetailedRun, Job, Shot
from model import envelope

RUN_KIND = "detailed_run"
MAX_SLICES_PER_WAVELENGTH = 128  # 8x the default grid: a run stays within minutes
PROGRESS_INTERVAL_S = 0.5  # the job row is written at most this often while the solver runs
# One solver at a time per process: the runs are CPU-bound and the service has few cores.
_SOLVER_SLOT = threading.BoundedSemaphore(1)

# Chart payload limits (the page embeds the charts; the stored result keeps every value).
MAP_MAX_ZETA = 400
MAP_MAX_Z = 100
CURVE_MAX_POINTS = 800
FIELD_MAX_POINTS = 4000

SOLVER_COLOUR = OKABE_ITO["blue"]
CLOSED_FORM_COLOUR = OKABE_ITO["bluish_green"]
LIMIT_COLOUR = OKABE_ITO["vermillion"]
REFERENCE_COLOUR = OKABE_ITO["grey"]


class RunParameters(BaseModel):
    """What a caller may choose for one run (the API body and the CLI options)."""

    model_config = ConfigDict(extra="forbid")

    slices_per_wavelength: int = Field(
        16, ge=16, le=MAX_SLICES_PER_WAVELENGTH, strict=True, description="slices per plasma wavelength (at least 16)")
    dz_m: float | None = Field(
        None, gt=0, allow_inf_nan=False, strict=True,
        description="integration step along the plasma [m]; default: the solver's choice")


def parse_parameters(raw: Mapping[str, Any] | None) -> RunParameters:
    """RunParameters from plain values, or a 422 naming each failing field."""
    try:
        return RunParameters.model_validate(dict(raw or {}))
    except ValidationError as exc:
        raise invalid_input(pydantic_problems(exc.errors())) from None


def step_problems(params: RunParameters, plasma_length_m: float) -> list[FieldProblem]:
    """A requested step must keep the run within the solver's step limit (model.envelope.MAX_STEPS)."""
    if params.dz_m is None:
        return []
    steps = math.ceil(plasma_length_m / params.dz_m - 1e-9)
    if steps > envelope.MAX_STEPS:
        return [("dz_m", f"{plasma_length_m:g} m of plasma in steps of {params.dz_m:g} m is {steps} steps; "
                         f"the solver takes at most {envelope.MAX_STEPS} (use dz_m >= {plasma_length_m / envelope.MAX_STEPS:.3g})")]
    return []


# ----------------------------------------------------------------------------- starting


def _shot_or_404(session: Session, campaign: Campaign, shot_id: str) -> Shot:
    shot = shot_store.get_shot(session, campaign.id, shot_id)
    if shot is None:
        raise not_found(f"shot {shot_id!r} in campaign {campaign.slug!r}")
    return shot


def _same_request(a: Mapping[str, Any], b: Mapping[str, Any]) -> bool:
    keys = ("shot_pk", "shot_revision", "slices_per_wavelength", "dz_m", "settings_version")
    return all(a.get(k) == b.get(k) for k in keys)


def start_run(session: Session, slug: str, shot_id: str, params: RunParameters, actor: str) -> Job:
    """Queue a run of the shot's current revision. Asked again while an identical run is still
    queued or running, it returns that job instead of starting a second one."""

    def work() -> Job:
        begin_write(session)
        campaign = get_campaign_or_404(session, slug)
        shot = _shot_or_404(session, campaign, shot_id)
        problems = step_problems(params, shot.plasma_length_m)
        if problems:
            raise invalid_input(problems)
        wanted = {
            "shot_pk": shot.id,
            "shot_id": shot.shot_id,
            "shot_revision": shot.revision,
            "slices_per_wavelength": params.slices_per_wavelength,
            "dz_m": params.dz_m,
            "settings_version": campaign.settings_version,
            "settings": dict(campaign.model_settings or {}),
        }
        for job in run_store.unfinished_jobs(session, RUN_KIND, campaign.id):
            if _same_request(jobs.job_params(job), wanted):
                return job
        job = jobs.new_job(session, RUN_KIND, campaign.id, wanted)
        audit.record(session, actor, "detailed_run.start", campaign_slug=slug, target=shot.shot_id,
                     detail={"job_id": job.id, **{k: v for k, v in wanted.items() if k != "settings"}})
        return job

    return run_write(session, work)


# ------------------------------------------------------------------------------ the job


class JobProgress:
    """The solver's progress fraction as the job's done/total in percent, written at most every interval."""

    def __init__(self, report: jobs.Progress, interval_s: float = PROGRESS_INTERVAL_S,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.report, self.interval_s, self.clock = report, interval_s, clock
        self.last_percent, self.last_at = -1, -math.inf

    def __call__(self, fraction: float) -> None:
        percent = min(100, max(0, int(fraction * 100)))
        now = self.clock()
        if percent <= self.last_percent or (percent < 100 and now - self.last_at < self.interval_s):
            return
        self.last_percent, self.last_at = percent, now
        self.report(percent, 100, f"solving the envelope equations: {percent} %")


@jobs.job_kind(RUN_KIND)
def run_detailed_job(factory: sessionmaker[Session], job_id: str, progress: jobs.Progress) -> dict[str, Any]:
    """Solve, then store the result in one transaction. Safe to restart: a stored run is not stored twice."""
    with factory() as session:
        job = job_store.get_job(session, job_id)
        p = jobs.job_params(job)
        stored = run_store.run_id_for_job(session, job_id)
        payload = run_store.revision_payload(session, p["shot_pk"], p["shot_revision"]) if stored is None else None
    if stored is not None:
        return {"run_id": stored, "shot_id": p["shot_id"]}
    if payload is None:
        raise LookupError(f"shot {p['shot_id']!r} revision {p['shot_revision']} no longer exists")
    progress(0, 100, "waiting for the solver")
    with _SOLVER_SLOT:
        progress(0, 100, "setting up the slices")
        result = envelope.simulate_envelope(
            payload, p["settings"], p["slices_per_wavelength"], p["dz_m"], progress=JobProgress(progress))
    progress(100, 100, "storing the result")
    document = envelope.envelope_result_to_json(result)
    with factory() as session:
        begin_write(session)
        run = run_store.add_run(session, DetailedRun(
            shot_pk=p["shot_pk"],
            job_id=job_id,
            shot_revision=p["shot_revision"],
            model_version=model.MODEL_VERSION,
            parameters={k: p[k] for k in ("slices_per_wavelength", "dz_m", "settings_version", "settings")},
            result=document,
            created_at=datetime.now(timezone.utc),
        ))
        run_id = run.id
        session.commit()
    return {"run_id": run_id, "shot_id": p["shot_id"], "valid_until_m": document["valid_until_m"]}


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
        "created_at": run.created_at.astimezone(timezone.utc).isoformat().replace("+00:00", "Z"),
        "url": url,
        "figures_url": f"{url}/figures",
    }


def _campaign_and_shot(session: Session, slug: str, shot_id: str) -> tuple[Campaign, Shot]:
    campaign = get_campaign_or_404(session, slug)
    return campaign, _shot_or_404(session, campaign, shot_id)


def list_runs(session: Session, slug: str, shot_id: str) -> list[dict[str, Any]]:
    _campaign, shot = _campaign_and_shot(session, slug, shot_id)
    return [run_meta(r, shot, slug) for r in run_store.list_runs(session, shot.id)]


def _run_or_404(session: Session, slug: str, shot_id: str, run_id: int) -> tuple[DetailedRun, Shot]:
    _campaign, shot = _campaign_and_shot(session, slug, shot_id)
    run = run_store.get_run(session, shot.id, run_id)
    if run is None:
        raise not_found(f"detailed run {run_id} of shot {shot_id!r}")
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
        "stale_note": (f"This run solved revision {run.shot_revision}; the shot is now at revision {shot.revision}."
                       if stale else ""),
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
        except Exception as exc:  # noqa: BLE001 - an unreadable stored run must not break the shot page
            problem = f"The latest detailed run could not be drawn ({type(exc).__name__}: {exc})."
    pending = next((j.id for j in run_store.unfinished_jobs(session, RUN_KIND, campaign.id)
                    if jobs.job_params(j).get("shot_pk") == shot.id), None)
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


def _text(value: Any, unit: str = "") -> str:
    """Counts as they are, other numbers as the exports write them."""
    if isinstance(value, int) and not isinstance(value, bool):
        return f"{value} {unit}".strip()
    return format_number(value, unit)


def run_facts(doc: Mapping[str, Any], run: DetailedRun | None = None) -> list[list[str]]:
    """Label/value pairs of a run's key numbers (the same list on the page and in the HTML file)."""
    n = doc.get("numerics") or {}
    facts = []
    if run is not None:
        facts += [["run", f"#{run.id}, shot revision {run.shot_revision}, model {run.model_version}"]]
    facts += [
        ["grid", f"{_text(n.get('slices'))} slices ({_text(n.get('slices_per_wavelength'))} per plasma wavelength) "
                 f"\u00d7 {_text(n.get('steps'))} steps of {_text(n.get('dz_m'), 'm')}"
                 f"{' (default step)' if n.get('dz_default') else ''}"],
        ["seed", str(n.get("seed") or "\u2014")],
        ["valid until", _text(doc.get("valid_until_m"), "m")],
        ["saturation (solver)", _text(doc.get("saturation_z_m"), "m")
         + (f" \u2014 {doc['saturation_reason']}" if doc.get("saturation_reason") else "")],
        ["saturation (closed form)", _text(doc.get("closed_form_saturation_z_m"), "m")],
        ["fitted e-folds", f"{_text(doc.get('fitted_efolds'))} against {_text(doc.get('closed_form_efolds_at_fit'))} "
                           f"closed form (difference {_text(doc.get('efolds_difference'))})"],
        ["wall time", _text(n.get("wall_time_s"), "s")],
    ]
    return facts


# ------------------------------------------------------------------------------ charts


def _array(values: Any) -> np.ndarray:
    """JSON lists (None for NaN) as a float array."""
    return np.array(values if values is not None else [], dtype=float)


def _plain(values: np.ndarray, digits: int = 6) -> list[Any]:
    """Rounded numbers for the chart payload; NaN and infinity become null."""
    if values.ndim > 1:
        return [_plain(row, digits) for row in values]
    return [float(f"{v:.{digits}g}") if math.isfinite(v) else None for v in values.tolist()]


def _stride(n: int, limit: int) -> np.ndarray:
    """At most `limit` indices spread evenly over range(n), first and last included."""
    if n <= limit:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, limit).round().astype(int))


def _binned(values: np.ndarray, size: int, reduce: Callable[..., np.ndarray]) -> np.ndarray:
    """Rows grouped `size` at a time (the last group padded with NaN) and reduced ignoring NaN."""
    if size <= 1:
        return values
    rows = values.shape[0]
    pad = (-rows) % size
    padded = np.concatenate([values, np.full((pad, *values.shape[1:]), np.nan)]) if pad else values
    grouped = padded.reshape(rows // size + (1 if pad else 0), size, *values.shape[1:])
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN groups reduce to NaN
        return reduce(grouped, axis=1)


def _valid_until(doc: Mapping[str, Any]) -> tuple[float | None, float]:
    length = float(doc["ez_z_m"])
    valid = doc.get("valid_until_m")
    return (None if valid is None or valid >= length else float(valid)), length


def _validity_marks(doc: Mapping[str, Any]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Shade z beyond saturation and draw a vertical line where validity ends (charts over z)."""
    valid, length = _valid_until(doc)
    if valid is None:
        return [], []
    shapes = [
        {"type": "rect", "xref": "x", "yref": "paper", "x0": valid, "x1": length, "y0": 0, "y1": 1,
         "fillcolor": "#7f7f7f", "opacity": 0.22, "line": {"width": 0}, "layer": "above"},
        {"type": "line", "xref": "x", "yref": "paper", "x0": valid, "x1": valid, "y0": 0, "y1": 1,
         "line": {"color": LIMIT_COLOUR, "width": 2, "dash": "dash"}, "layer": "above"},
    ]
    annotations = [
        {"xref": "x", "yref": "paper", "x": valid, "y": 1.0, "yanchor": "bottom", "xanchor": "left",
         "showarrow": False, "font": {"color": LIMIT_COLOUR, "size": 11},
         "text": f"valid until saturation, z = {valid:.3g} m (shaded: qualitative)"},
    ]
    return shapes, annotations


def sigma_map_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """σ_r(ζ, z) as a heatmap of log10(σ_r / 1 mm): z across, ζ up (head at the top)."""
    sigma_mm = _array(doc["sigma_r_m"]) * 1e3  # slices x stored z
    zeta_mm = _array(doc["zeta_m"]) * 1e3
    z_m = _array(doc["z_m"])
    columns = _stride(z_m.size, MAP_MAX_Z)
    bin_size = max(1, math.ceil(zeta_mm.size / MAP_MAX_ZETA))
    # The largest radius of each group of slices: a group spans a fraction of a plasma wavelength
    # or more, and its maximum keeps the defocused slices visible instead of aliasing them away.
    sigma = _binned(sigma_mm[:, columns], bin_size, np.nanmax)
    zeta = _binned(zeta_mm, bin_size, np.nanmean)
    with np.errstate(all="ignore"):
        log_sigma = np.log10(np.where(sigma > 0, sigma, np.nan))
    finite = log_sigma[np.isfinite(log_sigma)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (-2.0, 1.0)
    tick_values = [math.log10(v) for v in (0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100)
                   if lo <= math.log10(v) <= hi]
    tick_digits = 3
    if len(tick_values) < 3:  # a narrow range: evenly spaced ticks instead of round numbers
        tick_values, tick_digits = np.linspace(lo, hi, 5).tolist(), 4
    grouped = f"; maximum over groups of {bin_size} slices" if bin_size > 1 else ""
    shapes, annotations = _validity_marks(doc)
    zeta_ref = float(doc["reference_zeta_m"]) * 1e3
    shapes.append({"type": "line", "xref": "paper", "yref": "y", "x0": 0, "x1": 1, "y0": zeta_ref, "y1": zeta_ref,
                   "line": {"color": "#ffffff", "width": 1, "dash": "dot"}, "layer": "above"})
    trace = {
        "type": "heatmap",
        "x": _plain(z_m[columns]),
        "y": _plain(zeta),
        "z": _plain(log_sigma, 4),
        "colorscale": "Viridis",
        "zmin": lo,
        "zmax": hi,
        "colorbar": {"title": {"text": "σ_r [mm]", "side": "right"},
                     "tickvals": tick_values, "ticktext": [f"{10 ** v:.{tick_digits}g}" for v in tick_values]},
        "hovertemplate": "z %{x:.3g} m<br>ζ %{y:.4g} mm<br>log₁₀(σ_r / mm) %{z:.3f}<extra></extra>",
        "name": "σ_r(ζ, z)",
    }
    figure_layout = layout(
        height=420,
        xaxis=axis("z along the plasma [m]"),
        yaxis=axis("ζ along the bunch [mm]"),
        shapes=shapes,
        annotations=[*annotations, {
            "xref": "paper", "yref": "paper", "x": 0, "y": -0.2, "xanchor": "left", "yanchor": "top",
            "showarrow": False, "font": {"size": 11},
            "text": f"head up; dotted line: reference slice{grouped}"}],
        margin={"l": 70, "r": 20, "t": 40, "b": 80},
    )
    return {"data": [trace], "layout": figure_layout}


def modulation_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """δ(z) at the reference slice from the solver beside the closed form (MODEL.md section 4), log y."""
    z = _array(doc["z_steps_m"])
    keep = _stride(z.size, CURVE_MAX_POINTS)
    z = z[keep]

    def positive(key: str) -> list[Any]:
        values = _array(doc[key])[keep]
        return _plain(np.where(values > 0, values, np.nan))

    sat = float(doc["saturation_modulation"])
    shapes, annotations = _validity_marks(doc)
    xs = _plain(z)
    # The solver starts from an unmodulated beam (δ ~ 0 at z = 0): start the axis where growth is visible.
    shown = [v for v in (positive("reference_modulation_steps")[1:] + positive("closed_form_modulation_steps"))
             if v is not None]
    y_range = [math.log10(min(shown) / 3.0), math.log10(sat * 3.0)] if shown and min(shown) < sat else None
    traces = [
        {"type": "scatter", "mode": "lines", "x": xs, "y": positive("reference_modulation_steps"),
         "name": "δ(z) envelope solver", "line": {"color": SOLVER_COLOUR, "width": 3},
         "hovertemplate": "z %{x:.3g} m<br>δ %{y:.3g}<extra>solver</extra>"},
        {"type": "scatter", "mode": "lines", "x": xs, "y": positive("closed_form_modulation_steps"),
         "name": "δ(z) closed form", "line": {"color": CLOSED_FORM_COLOUR, "width": 2, "dash": "dash"},
         "hovertemplate": "z %{x:.3g} m<br>δ %{y:.3g}<extra>closed form</extra>"},
        {"type": "scatter", "mode": "lines", "x": [xs[0], xs[-1]] if xs else [], "y": [sat, sat],
         "name": f"saturation level δ_sat = {sat:g}", "line": {"color": REFERENCE_COLOUR, "dash": "dot"},
         "hoverinfo": "skip"},
    ]
    figure_layout = layout(
        height=380,
        xaxis=axis("z along the plasma [m]"),
        yaxis=axis(f"δ at the reference slice ζ = {float(doc['reference_zeta_m']) * 1e3:.4g} mm",
                    type="log", exponentformat="power", **({"range": y_range} if y_range else {})),
        shapes=shapes,
        annotations=annotations,
        margin={"l": 70, "r": 20, "t": 40, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


def exit_field_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """On-axis E_z(ζ) at the plasma exit [MV/m]; past saturation it is marked qualitative."""
    zeta = _array(doc["zeta_m"]) * 1e3
    field = _array(doc["ez_v_m"]) / 1e6
    valid, length = _valid_until(doc)
    traces: list[dict[str, Any]] = []
    if zeta.size > FIELD_MAX_POINTS:
        size = math.ceil(zeta.size / (FIELD_MAX_POINTS // 2))
        centre = _plain(_binned(zeta, size, np.nanmean))
        # The field oscillates once per plasma wavelength: draw its band, not an aliased line.
        traces += [
            {"type": "scatter", "mode": "lines", "x": centre, "y": _plain(_binned(field, size, np.nanmin)),
             "line": {"color": SOLVER_COLOUR, "width": 0.5}, "name": "E_z minimum", "showlegend": False,
             "hovertemplate": "ζ %{x:.4g} mm<br>min E_z %{y:.3g} MV/m<extra></extra>"},
            {"type": "scatter", "mode": "lines", "x": centre, "y": _plain(_binned(field, size, np.nanmax)),
             "fill": "tonexty", "line": {"color": SOLVER_COLOUR, "width": 0.5},
             "name": f"E_z(ζ) band (minimum to maximum over groups of {size} slices)",
             "hovertemplate": "ζ %{x:.4g} mm<br>max E_z %{y:.3g} MV/m<extra></extra>"},
        ]
    else:
        traces.append({"type": "scatter", "mode": "lines", "x": _plain(zeta), "y": _plain(field),
                       "name": "E_z(ζ) on axis", "line": {"color": SOLVER_COLOUR, "width": 1.5},
                       "hovertemplate": "ζ %{x:.4g} mm<br>E_z %{y:.3g} MV/m<extra></extra>"})
    zeta_ref = float(doc["reference_zeta_m"]) * 1e3
    shapes = [{"type": "line", "xref": "x", "yref": "paper", "x0": zeta_ref, "x1": zeta_ref, "y0": 0, "y1": 1,
               "line": {"color": REFERENCE_COLOUR, "dash": "dash"}}]
    if valid is None:
        note, colour = f"at the plasma exit, z = {length:.3g} m: inside the model's validity", INK
    else:
        note = (f"at the plasma exit, z = {length:.3g} m, past saturation (valid until z = {valid:.3g} m): "
                "qualitative only")
        colour = LIMIT_COLOUR
    figure_layout = layout(
        height=360,
        xaxis=axis("ζ along the bunch [mm] (head right; dashed: reference slice)"),
        yaxis=axis("on-axis E_z [MV/m]"),
        shapes=shapes,
        annotations=[{"xref": "paper", "yref": "paper", "x": 0, "y": 1.0, "xanchor": "left", "yanchor": "bottom",
                      "showarrow": False, "text": note, "font": {"color": colour, "size": 11}}],
        margin={"l": 70, "r": 20, "t": 40, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


CHART_TITLES = {
    "map": "Slice radius σ_r(ζ, z)",
    "growth": "Modulation δ(z) at the reference slice",
    "field": "On-axis field E_z(ζ) at the exit",
}


def run_figures(doc: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """The three charts of a run, keyed like CHART_TITLES."""
    return {"map": sigma_map_figure(doc), "growth": modulation_figure(doc), "field": exit_field_figure(doc)}


# ------------------------------------------------------------------------ the HTML file


def _file_template():
    from jinja2 import Environment, PackageLoader, select_autoescape

    from app.advisory import add_caution_global

    env = Environment(loader=PackageLoader("app", "templates"), autoescape=select_autoescape(["html"]),
                      trim_blocks=True, lstrip_blocks=True)
    return add_caution_global(env).get_template("detailed_run_file.html")


def render_run_html(shot: Mapping[str, Any], doc: Mapping[str, Any]) -> str:
    """A self-contained HTML page of one run: the three charts with Plotly's JavaScript inlined (opens offline)."""
    import plotly.io as pio
    from markupsafe import Markup

    figures = run_figures(doc)
    charts = []
    for i, (key, figure) in enumerate(figures.items()):
        div = pio.to_html(figure, include_plotlyjs=i == 0, full_html=False, validate=False,
                          div_id=f"chart-{key}", default_height=f"{figure['layout'].get('height', 400)}px",
                          config={"displaylogo": False, "responsive": True})
        charts.append({"key": key, "title": CHART_TITLES[key], "html": Markup(div)})
    return _file_template().render(
        shot_id=str(shot.get("shot_id") or "unnamed shot"),
        charts=charts,
        facts=run_facts(doc),
        validity_note=doc.get("validity_note") or "",
        model_version=model.MODEL_VERSION,
        created=datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"),
    )


def simulate_to_html(
    shot: Mapping[str, Any],
    params: RunParameters,
    out: Path,
    progress: Callable[[float], None] | None = None,
    settings: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Run one shot (API JSON shape) and write its HTML file; returns the JSON result.

    Raises ShotInputError (every failing field) or ProblemError 422 (run parameters) before any work.
    """
    from app.services.ingest import physics_problems

    if not isinstance(shot, Mapping):
        raise invalid_input([("body", "a shot must be a JSON object")])
    problems = physics_problems(shot)
    if problems:
        raise model.ShotInputError(problems)
    length = float(shot["plasma"]["length_m"])
    problems = step_problems(params, length)
    if problems:
        raise invalid_input(problems)
    result = envelope.simulate_envelope(shot, settings, params.slices_per_wavelength, params.dz_m, progress=progress)
    doc = envelope.envelope_result_to_json(result)
    html = render_run_html(shot, doc).encode("utf-8")
    write_atomically(out, lambda stream: stream.write(html))
    return doc


def problem_lines(problems: Sequence[Mapping[str, str]] | Sequence[tuple[str, str]]) -> list[str]:
    """'field: reason' lines of a 422's errors or a ShotInputError's problems."""
    lines = []
    for item in problems:
        field, reason = (item["field"], item["reason"]) if isinstance(item, Mapping) else item
        lines.append(f"{field}: {reason}")
    return lines
