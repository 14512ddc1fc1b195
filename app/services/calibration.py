"""The model against measurement for a campaign or a period of it: the density scale and its
changes, the scaling checks, what drives the outcome (MODEL.md, "Model against measurement";
the statistics are ``model.calibration``), applying a scale, and the command line's table.

``measure`` reads the shots once and computes everything; ``answer`` is the API's shape; the
page (``app.services.dashboard.calibration_page``), the weekly summary and ``wakeledger
calibrate`` take what they show from the same result.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, time, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
import orjson
from sqlalchemy.orm import Session, sessionmaker

import model
from app.errors import InvalidInput
from app.plain import finite_or_none
from app.presentation.numbers import format_number
from app.services.campaign_settings import change_settings
from app.services.campaigns import effective_settings, require_campaign
from app.services.export_table import NOT_EVALUATED, ShotTable
from app.services.phase_spread import JITTER_SOURCES, derivative_sample, phase_jitter, typical_phase_derivatives
from app.store import calibration as store
from app.tables import Campaign
from app.times import campaign_zone, epoch_seconds, format_utc
from model import calibration as cal

Progress = Callable[[int, int, str], None]  # (done, total, message)

#: The measured diagnostics, by input path.
MEASURED_DIAGNOSTICS: tuple[str, ...] = (
    "measured.modulation_freq_ghz",
    "measured.modulation_phase_rad",
    "measured.halo_radius_mm",
    "measured.witness_energy_mev",
    "measured.microbunch_count",
)
#: Outcomes whose drivers are ranked: the measured diagnostics and the model's e-folds.
DRIVER_OUTCOMES: tuple[str, ...] = (*MEASURED_DIAGNOSTICS, "efolds_exit")
#: Numeric conditions a driver may be (inputs of the shot, not measurements).
DRIVER_INPUTS: tuple[str, ...] = tuple(
    f.path for f in model.INPUT_FIELDS if f.kind in ("float", "integer") and not f.path.startswith("measured.")
)
#: Inputs read for every shot: the diagnostics, the conditions of the scaling checks and of the phase
#: jitter, and the gradient (whether the stored evaluation gives c without the model). Every other
#: input is read only for the shots that need it (``store.read_inputs``).
SHOT_INPUTS: tuple[str, ...] = tuple(
    dict.fromkeys(
        (*MEASURED_DIAGNOSTICS, "plasma.length_m", "driver.momentum_gev", "plasma.gradient_pct_per_m", *JITTER_SOURCES)
    )
)
#: Where a shot's run tag is read (top-level sections other than the physics ones are kept verbatim):
#: the first of these paths whose value is a non-blank string or an integer; its text is the run label.
RUN_TAG_PATHS: tuple[str, ...] = ("daq.run", "daq.run_id", "daq.run_number", "run", "run_id")
#: Drivers shown per outcome.
TOP_DRIVERS = 8


@dataclass(frozen=True)
class ScalingCheck:
    """One diagnostic against its model counterpart, with the points the page draws."""

    diagnostic: str
    proxy: str
    proxy_unit: str
    expected_exponent: float
    label: str  # what the proxy is, in words
    points: str  # "shots" or "days"
    fit: cal.PowerLawFit
    x: np.ndarray
    y: np.ndarray
    names: list[str]  # shot id (or day) of each point


@dataclass(frozen=True)
class RunPoint:
    """The scale over the shots of one run (a run tag's label), with the run's first and last shot."""

    run: str
    first: int  # index of the run's first shot (time order)
    last: int  # index of its last shot
    scale: cal.MedianInterval


@dataclass
class Calibration:
    campaign: Campaign
    start: datetime | None
    end: datetime | None
    applied_scale: float
    shots: int
    shot_ids: list[str] = field(default_factory=list)
    taken_at: np.ndarray = field(default_factory=lambda: np.zeros(0))  # seconds since 1970, UTC
    ratios: np.ndarray = field(default_factory=lambda: np.zeros(0))
    scale: cal.MedianInterval = cal.MedianInterval(None, None, None, None, 0, "none")
    mismatch: cal.MedianInterval = cal.MedianInterval(None, None, None, None, 0, "none")
    series: list[tuple[str, cal.MedianInterval]] = field(default_factory=list)
    run_series: list[RunPoint] = field(default_factory=list)
    run_paths: list[str] = field(default_factory=list)  # the RUN_TAG_PATHS that gave a run tag
    untagged: int = 0  # shots with a measured frequency and no run tag (while others have one)
    changes: list[cal.ScaleChange] = field(default_factory=list)
    scaling: list[ScalingCheck] = field(default_factory=list)
    drivers: list[tuple[str, list[cal.DriverRank], int]] = field(default_factory=list)


def instant(seconds: float) -> datetime:
    """A taken_at of the result (seconds since 1970) as an aware UTC datetime."""
    return datetime.fromtimestamp(float(seconds), UTC)


def day_segments(stamps: np.ndarray, zone: ZoneInfo) -> list[tuple[str, slice]]:
    """(day of ``zone``, its shots) of time-ordered instants (seconds since 1970), days with shots only."""
    if not stamps.size:
        return []
    first, last = instant(stamps[0]).astimezone(zone).date(), instant(stamps[-1]).astimezone(zone).date()
    days = [first + timedelta(days=i) for i in range((last - first).days + 1)]
    starts = [datetime.combine(d, time(0), tzinfo=zone).timestamp() for d in days]
    bounds = [*np.searchsorted(stamps, starts, side="left").tolist(), int(stamps.size)]
    bounds[0] = 0
    return [(d.isoformat(), slice(lo, hi)) for d, lo, hi in zip(days, bounds[:-1], bounds[1:], strict=True) if hi > lo]


def _run_tag(text: str | None) -> tuple[str, int] | None:
    """(label, index into RUN_TAG_PATHS) of one shot's JSON array of the values at the paths."""
    if text is None:
        return None
    for i, value in enumerate(orjson.loads(text)):
        if isinstance(value, str) and value.strip():
            return value, i
        if isinstance(value, int) and not isinstance(value, bool):
            return str(value), i
    return None


def run_groups(tags: Sequence[str | None]) -> tuple[list[tuple[str, np.ndarray]], list[str]]:
    """The runs of time-ordered shots, (label, indices of its shots) in the order of their first shot,
    from each shot's JSON array of run-tag values (decoded once per distinct array), and the paths
    that gave a tag."""
    decoded: dict[str | None, tuple[str, int] | None] = {}
    codes: dict[str, int] = {}
    paths: set[int] = set()
    shot_codes = np.full(len(tags), -1, dtype=np.int64)
    for i, text in enumerate(tags):
        if text not in decoded:
            decoded[text] = _run_tag(text)
        tag = decoded[text]
        if tag is not None:
            shot_codes[i] = codes.setdefault(tag[0], len(codes))
            paths.add(tag[1])
    if not codes:
        return [], []
    order = np.argsort(shot_codes, kind="stable")  # each run's shots stay in time order
    sorted_codes = shot_codes[order]
    cuts = np.flatnonzero(np.diff(sorted_codes)) + 1
    labels = list(codes)
    groups = [
        (labels[int(sorted_codes[part[0]])], order[part])
        for part in np.split(np.arange(order.size), cuts)
        if sorted_codes[part[0]] >= 0
    ]
    groups.sort(key=lambda g: int(g[1][0]))
    return groups, [RUN_TAG_PATHS[i] for i in sorted(paths)]


_RUN_TAG_KEYS = tuple(path.partition(".")[::2] for path in RUN_TAG_PATHS)  # (section, key or "")


def run_tag_values(sections: Mapping[str, Any]) -> list[Any]:
    """The values at RUN_TAG_PATHS of a shot's other top-level sections (None where absent or where
    the section is no object), as ``store.read_shots`` extracts them from the raw payload."""
    values = []
    for top, key in _RUN_TAG_KEYS:
        value = sections.get(top)
        values.append((value.get(key) if isinstance(value, dict) else None) if key else value)
    return values


def _run_tag_texts(every_sections: Sequence[Mapping[str, Any]]) -> list[str]:
    """``_json_array(run_tag_values(...))`` of each shot, encoded once per distinct tuple of texts and
    nulls (other values are encoded each time: 7, 7.0 and True are equal keys, and different tags)."""
    texts: dict[tuple[Any, ...], str] = {}
    out = []
    for sections in every_sections:
        values = run_tag_values(sections)
        if not all(v is None or type(v) is str for v in values):
            out.append(_json_array(values))
            continue
        key = tuple(values)
        text = texts.get(key)
        if text is None:
            text = texts[key] = _json_array(values)
        out.append(text)
    return out


def _json_array(values: list[Any]) -> str:
    try:
        return orjson.dumps(values).decode()
    except TypeError:  # an integer beyond 64 bits
        return json.dumps(values, ensure_ascii=False, separators=(",", ":"))


def shot_columns(table: ShotTable, settings_version: int) -> store.ShotColumns:
    """``store.read_shots``' columns (the evaluated shots, SHOT_INPUTS and CALIBRATION_OUTPUTS) and every
    input of a table read already (the weekly summary's week), the same values as read from the database."""
    evaluated = np.flatnonzero(table.status != NOT_EVALUATED)  # read_shots joins the evaluations
    picks = evaluated.tolist()
    current = [
        table.settings_version[i] == settings_version and table.model_version[i] == model.MODEL_VERSION for i in picks
    ]
    values = {path: table.inputs[path][evaluated] for path in SHOT_INPUTS}
    values |= {name: table.outputs[name][evaluated] for name in store.CALIBRATION_OUTPUTS}
    return store.ShotColumns(
        pk=table.shot_pk[evaluated],
        shot_id=[table.shot_id[i] for i in picks],
        taken_at=epoch_seconds([table.taken_at[i] for i in picks]),
        current=np.array(current, dtype=bool).reshape(-1),
        run_tags=_run_tag_texts([table.extras[i] for i in picks]),
        values=values,
        every_input={path: column[evaluated] for path, column in table.inputs.items()},
    )


def _spread(values: Mapping[str, np.ndarray], at: np.ndarray, n: int) -> dict[str, np.ndarray]:
    """Columns of n shots holding ``values`` at the indices ``at`` (NaN, or None for text, elsewhere)."""
    out: dict[str, np.ndarray] = {}
    for path, column in values.items():
        full = np.full(n, None, dtype=object) if column.dtype == object else np.full(n, np.nan)
        full[at] = column
        out[path] = full
    return out


def measure(
    session: Session,
    slug: str,
    start: datetime | None = None,
    end: datetime | None = None,
    progress: Progress | None = None,
    *,
    drivers: bool = True,
    week: ShotTable | None = None,
) -> Calibration:
    """Everything the model-against-measurement answer shows, for shots taken in [start, end)
    (without the driver ranking when not ``drivers``); ``week``: those shots already read with
    every input (the weekly summary's table), so that nothing is read again."""
    if start is not None and end is not None and end <= start:
        raise InvalidInput([("to", "must be later than from")])
    campaign = require_campaign(session, slug)
    settings = effective_settings(campaign)
    applied = float(settings["density_scale"])
    if week is not None:
        shots = shot_columns(week, campaign.settings_version)
    else:
        total = store.count_calibration_rows(session, campaign.id, start, end) if progress is not None else 0
        shots = store.read_shots(
            session,
            campaign.id,
            start,
            end,
            inputs=SHOT_INPUTS,
            settings_version=campaign.settings_version,
            model_version=model.MODEL_VERSION,
            run_tag_paths=RUN_TAG_PATHS,
            on_rows=(lambda done: progress(done, total, "reading shots")) if progress is not None else None,
        )
    n = len(shots.shot_id)
    result = Calibration(campaign, start, end, applied, n)
    result.shot_ids, result.taken_at = shots.shot_id, shots.taken_at
    if n == 0:
        return result
    values = shots.values
    overrides = campaign.model_settings or {}

    # c_i from the stored evaluation where it is current and exact; the model at density_scale 1 for the rest.
    measured_freq = values["measured.modulation_freq_ghz"]
    stored = cal.density_scale_ratios_from_evaluation(
        values["frequency_mismatch_pct"], values["plasma.gradient_pct_per_m"], applied
    )
    ratios = np.where(shots.current, stored, np.nan)
    rerun = np.flatnonzero(np.isfinite(measured_freq) & ~np.isfinite(ratios))
    # Every input of the shots the model runs on and of the samples the phase derivatives and the
    # driver ranking take (their indices depend only on which shots have a value).
    phases = values["measured.modulation_phase_rad"]
    with_phase = np.flatnonzero(np.isfinite(phases))
    phase_sample = with_phase[derivative_sample(with_phase.size)] if with_phase.size else with_phase
    outcomes = {**{p: values[p] for p in MEASURED_DIAGNOSTICS}, "efolds_exit": values["efolds_exit"]}
    samples = [cal.driver_sample(outcomes[name]) for name in DRIVER_OUTCOMES] if drivers else []
    wanted = np.unique(np.concatenate([rerun, phase_sample, *samples]).astype(np.int64))
    inputs = _spread(shots.inputs_at(session, wanted), wanted, n)
    if rerun.size:
        subset = {path: column[rerun] for path, column in inputs.items()}
        ratios[rerun] = cal.density_scale_ratios(subset, overrides)
    result.ratios = ratios
    result.scale = cal.scale_interval(ratios)
    result.mismatch = cal.median_interval(values["frequency_mismatch_pct"])
    days = day_segments(result.taken_at, campaign_zone(campaign.timezone))
    result.series = [(day, m) for day, m in cal.segment_medians(ratios, days) if m.shots]
    runs, result.run_paths = run_groups(shots.run_tags)
    if runs:
        medians = cal.segment_medians(ratios, runs)
        result.run_series = [
            RunPoint(label, int(at[0]), int(at[-1]), m)
            for (label, at), (_label, m) in zip(runs, medians, strict=True)
            if m.shots
        ]
        tagged = sum(p.scale.shots for p in result.run_series)
        result.untagged = int(np.isfinite(ratios).sum()) - tagged
    result.changes = cal.scale_changes(ratios)
    derivatives = (
        typical_phase_derivatives({p: c[with_phase] for p, c in inputs.items()}, overrides)
        if with_phase.size
        else dict.fromkeys(JITTER_SOURCES)
    )
    result.scaling = _scaling_checks(values, shots.shot_id, days, derivatives)
    driver_inputs = {p: inputs[p] for p in DRIVER_INPUTS}
    for name in DRIVER_OUTCOMES if drivers else ():
        ranking, used = cal.rank_drivers(outcomes[name], driver_inputs)
        result.drivers.append((name, ranking[:TOP_DRIVERS], used))
    return result


def _scaling_checks(
    columns: Mapping[str, np.ndarray],
    shot_ids: list[str],
    days: list[tuple[str, slice]],
    derivatives: Mapping[str, float | None],
) -> list[ScalingCheck]:
    """The checks of MODEL.md; ``columns`` hold SHOT_INPUTS and the stored outputs of every shot."""
    outputs = columns
    wake = outputs["wakefield_estimate_mv_m"]
    length, momentum = columns["plasma.length_m"], columns["driver.momentum_gev"]
    per_shot = [
        (
            "measured.modulation_freq_ghz",
            "plasma_frequency_ghz",
            "GHz",
            1.0,
            "the model's plasma frequency at the entrance",
            outputs["plasma_frequency_ghz"],
        ),
        (
            "measured.halo_radius_mm",
            "wakefield_estimate_mv_m × plasma.length_m / driver.momentum_gev",
            "MV/GeV",
            1.0,
            "kick-angle proxy of the saturated wake (a project proxy, not a published law)",
            cal.kick_angle_proxy(wake, length, momentum),
        ),
        (
            "measured.witness_energy_mev",
            "wakefield_estimate_mv_m × (plasma.length_m − saturation_length_m)",
            "MV",
            1.0,
            "gain proxy over the length behind saturation, shots that saturate (a project proxy, not a published law)",
            cal.energy_gain_proxy(wake, length, outputs["saturation_length_m"]),
        ),
    ]
    checks = [
        ScalingCheck(
            diag, proxy, unit, b, label, "shots", cal.power_law_fit(x, columns[diag]), x, columns[diag], shot_ids
        )
        for diag, proxy, unit, b, label, x in per_shot
    ]
    # Phase: per day, the measured shot-to-shot jitter against the jitter the logged jitters imply
    # (the phase-stability figures: shots with a measured phase, the campaign's typical derivatives).
    phases = columns["measured.modulation_phase_rad"]
    with_phase = np.isfinite(phases)
    labels: list[str] = []
    expected: list[float] = []
    measured: list[float] = []
    for day, shots in days:
        pick = np.flatnonzero(with_phase[shots]) + shots.start
        sources = {p: columns[p][pick] for p in JITTER_SOURCES}
        jitter = phase_jitter(phases[pick], sources, derivatives)
        if jitter.measured_phase_std_rad and jitter.expected_phase_jitter_rad:
            labels.append(day)
            measured.append(jitter.measured_phase_std_rad)
            expected.append(jitter.expected_phase_jitter_rad)
    x, y = np.array(expected, dtype=float), np.array(measured, dtype=float)
    checks.append(
        ScalingCheck(
            "phase jitter (measured, per day)",
            "expected phase jitter (per day)",
            "rad",
            1.0,
            "root-sum-square of |dψ/d ln x| × shot-to-shot jitter of density, population, σ_z, σ_r"
            " (the phase-stability figures)",
            "days",
            cal.power_law_fit(x, y),
            x,
            y,
            labels,
        )
    )
    return checks


def _interval(m: cal.MedianInterval) -> dict[str, Any]:
    return {"estimate": m.estimate, "low": m.low, "high": m.high}


def answer(result: Calibration) -> dict[str, Any]:
    """The API's answer (GET /api/v1/campaigns/{slug}/calibration)."""
    return {
        "campaign": result.campaign.slug,
        "from": format_utc(result.start) if result.start else None,
        "to": format_utc(result.end) if result.end else None,
        "shots": result.shots,
        "applied_density_scale": result.applied_scale,
        "settings_version": result.campaign.settings_version,
        "density_scale": {
            **_interval(result.scale),
            "shots": result.scale.shots,
            "interval_method": result.scale.method,
        },
        "frequency_mismatch_pct": {**_interval(result.mismatch), "shots": result.mismatch.shots},
        "changes": [
            {
                "shot_id": result.shot_ids[c.index],
                "taken_at": format_utc(instant(result.taken_at[c.index])),
                "before": _interval(c.before),
                "after": _interval(c.after),
                "shots_before": c.before.shots,
                "shots_after": c.after.shots,
                "standard_errors": c.standard_errors,
            }
            for c in result.changes
        ],
        "series_by": "day",
        "series": [{"day": day, **_interval(m), "shots": m.shots} for day, m in result.series],
        "series_interval_method": "order statistics",
        "run_series_by": result.run_paths,
        "run_series": [
            {
                "run": point.run,
                "first_taken_at": format_utc(instant(result.taken_at[point.first])),
                "last_taken_at": format_utc(instant(result.taken_at[point.last])),
                **_interval(point.scale),
                "shots": point.scale.shots,
            }
            for point in result.run_series
        ],
        "run_untagged_shots": result.untagged,
        "scaling": [
            {
                "diagnostic": s.diagnostic,
                "proxy": s.proxy,
                "proxy_unit": s.proxy_unit,
                "proxy_note": s.label,
                "expected_exponent": s.expected_exponent,
                "points": s.points,
                "prefactor": s.fit.prefactor,
                "exponent": s.fit.exponent,
                "exponent_low": s.fit.exponent_low,
                "exponent_high": s.fit.exponent_high,
                "spearman": s.fit.spearman,
                "shots": s.fit.shots,
                "fitted_shots": s.fit.fitted_shots,
                "outliers": [s.names[i] for i in s.fit.outliers.tolist()],
            }
            for s in result.scaling
        ],
        "drivers": [
            {
                "diagnostic": name,
                "shots": used,
                "ranking": [
                    {"field": d.field, "rho": finite_or_none(d.rho), "low": d.low, "high": d.high} for d in ranking
                ],
            }
            for name, ranking, used in result.drivers
        ],
    }


def calibration_answer(
    session: Session, slug: str, start: datetime | None = None, end: datetime | None = None
) -> dict[str, Any]:
    """The campaign's (or the period's) model against measurement, in the API's shape."""
    return answer(measure(session, slug, start, end))


def apply_scale(session: Session, slug: str, scale: float, actor: str) -> str:
    """Make ``scale`` the campaign's density_scale through the settings (new settings version,
    the re-evaluation queued, audited); returns the job id."""
    _campaign, job = change_settings(session, slug, {"density_scale": float(scale)}, actor)
    return job.id


def _text(value: float | None, digits: int = 5) -> str:
    return format_number(value, digits=digits) if value is not None else "–"


def _series_line(result: dict[str, Any]) -> str:
    """What the series hold: days, and runs where the shots carry run tags (with the lowest and highest run)."""
    line = f"scale series: per day ({len(result['series'])} days)"
    runs = result["run_series"]
    if not runs:
        return line + f"; per run: no run tag in these shots ({', '.join(RUN_TAG_PATHS)})"
    line += f"; per run by {', '.join(result['run_series_by'])} ({len(runs)} runs"
    if result["run_untagged_shots"]:
        line += f", {result['run_untagged_shots']} shots without a run tag"
    line += ")"
    ranked = sorted((r for r in runs if r["estimate"] is not None), key=lambda r: r["estimate"])
    if len(ranked) > 1:
        low, high = ranked[0], ranked[-1]
        line += (
            f"\n  lowest run {low['run']}: {_text(low['estimate'])} [{_text(low['low'])}, {_text(low['high'])}] "
            f"({low['shots']} shots); highest run {high['run']}: {_text(high['estimate'])} "
            f"[{_text(high['low'])}, {_text(high['high'])}] ({high['shots']} shots)"
        )
    return line


def table_text(result: dict[str, Any]) -> str:
    """The command line's table of an answer."""
    scale = result["density_scale"]
    lines = [
        f"campaign {result['campaign']}: {result['shots']} shots"
        + (f" from {result['from']}" if result["from"] else "")
        + (f" to {result['to']}" if result["to"] else ""),
        f"density scale  {_text(scale['estimate'])}  [{_text(scale['low'])}, {_text(scale['high'])}]  "
        f"({scale['shots']} shots with a measured frequency; applied now: {_text(result['applied_density_scale'])})",
        f"frequency mismatch now  {_text(result['frequency_mismatch_pct']['estimate'], 3)} %  "
        f"[{_text(result['frequency_mismatch_pct']['low'], 3)}, {_text(result['frequency_mismatch_pct']['high'], 3)}]",
        _series_line(result),
        "",
        "changes of the scale:" if result["changes"] else "changes of the scale: none found",
    ]
    for c in result["changes"]:
        lines.append(
            f"  at {c['shot_id']} ({c['taken_at']}): {_text(c['before']['estimate'])} "
            f"[{_text(c['before']['low'])}, {_text(c['before']['high'])}] ({c['shots_before']} shots) -> "
            f"{_text(c['after']['estimate'])} [{_text(c['after']['low'])}, {_text(c['after']['high'])}] "
            f"({c['shots_after']} shots)"
        )
    lines += [
        "",
        f"{'scaling check':<36} {'exponent':>9} {'95 % interval':>20} {'expect':>6} {'rho':>6} "
        f"{'points':>7} {'outliers':>8}",
    ]
    for s in result["scaling"]:
        interval = f"[{_text(s['exponent_low'], 3)}, {_text(s['exponent_high'], 3)}]"
        lines.append(
            f"{s['diagnostic']:<36} {_text(s['exponent'], 3):>9} {interval:>20} {_text(s['expected_exponent'], 2):>6} "
            f"{_text(s['spearman'], 2):>6} {s['shots']:>7} {len(s['outliers']):>8}"
        )
    lines += ["", "what drives the outcome (Spearman rho, 95 % interval; scans dominate, correlation is not cause):"]
    for d in result["drivers"]:
        top = ", ".join(
            f"{r['field']} {_text(r['rho'], 2)} [{_text(r['low'], 2)}, {_text(r['high'], 2)}]" for r in d["ranking"][:3]
        )
        lines.append(f"  {d['diagnostic']} ({d['shots']} shots): {top or 'too few shots'}")
    return "\n".join(lines)


def run_calibrate(
    factory: sessionmaker[Session],
    slug: str,
    start: datetime | None,
    end: datetime | None,
    apply: bool,
    actor: str,
    progress: Progress | None = None,
) -> tuple[dict[str, Any], str | None]:
    """``wakeledger calibrate``: the answer, and with ``apply`` the estimate made the campaign's
    density_scale (the id of the queued re-evaluation)."""
    with factory() as session:
        result = answer(measure(session, slug, start, end, progress))
        session.rollback()
        job_id = None
        if apply:
            estimate = result["density_scale"]["estimate"]
            if estimate is None:
                raise InvalidInput([("campaign", "no shot of the period has a measured modulation frequency")])
            job_id = apply_scale(session, slug, estimate, actor)
    return result, job_id


def parse_instant(text: str | None, name: str) -> datetime | None:
    """An ISO 8601 instant with a UTC offset (``Z`` too) from the command line; None for none."""
    if text is None or not text.strip():
        return None
    try:
        moment = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise InvalidInput([(name, f"{text!r} is not an ISO 8601 instant (e.g. 2026-11-20T00:00:00Z)")]) from None
    if moment.tzinfo is None:
        raise InvalidInput([(name, f"{text!r} has no UTC offset (add Z or +01:00)")])
    return moment


def week_figures(
    session: Session, slug: str, start: datetime, end: datetime, week: ShotTable | None = None
) -> dict[str, Any]:
    """The weekly summary's part: the week's density scale with its interval, the changes found in
    the week and the scaling exponents (the API's fields, without drivers and shot lists); ``week``:
    the week's shots read already, with every input (``measure``)."""
    full = answer(measure(session, slug, start, end, drivers=False, week=week))
    return {
        "density_scale": full["density_scale"],
        "applied_density_scale": full["applied_density_scale"],
        "frequency_mismatch_pct": full["frequency_mismatch_pct"],
        "changes": full["changes"],
        "scaling": [
            {
                k: s[k]
                for k in (
                    "diagnostic",
                    "proxy",
                    "exponent",
                    "exponent_low",
                    "exponent_high",
                    "expected_exponent",
                    "spearman",
                    "shots",
                )
            }
            | {"outliers": len(s["outliers"])}
            for s in full["scaling"]
        ],
    }
