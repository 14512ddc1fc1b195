"""The shot page: inputs with units, derived quantities, flags, the growth curves drawn
with the model's own curve functions, and the revision history."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

import model
from app.plain import rounded, rounded_list
from app.presentation.charts import axis, layout
from app.presentation.fields import unit_of
from app.presentation.palette import INK, OKABE_ITO
from app.services.campaigns import effective_settings
from app.services.export_table import ENVELOPE_KEYS
from app.store import dashboard as store
from app.tables import Campaign, Evaluation, Shot
from app.times import campaign_zone, local_text


@dataclass(frozen=True)
class InputRow:
    path: str
    value: Any
    unit: str
    description: str
    valid_range: str
    defaulted: bool = False  # the shot left it out: the value is the model's default


@dataclass(frozen=True)
class OutputRow:
    name: str
    value: float | None
    unit: str


@dataclass(frozen=True)
class FlagRow:
    code: str
    severity: str
    value: float | None
    limit: float | None
    message: str


@dataclass(frozen=True)
class RevisionRow:
    revision: int
    created_local: str
    author: str
    reason: str
    changes: list[tuple[str, Any, Any]]  # (dotted field, before, after)


@dataclass
class ShotDetail:
    shot: Shot
    taken_local: str
    status: str | None
    model_version: str | None
    settings_version: int | None
    evaluated_local: str
    inputs: list[InputRow]
    outputs: list[OutputRow]
    flags: list[FlagRow]
    revisions: list[RevisionRow]
    extra_fields: dict[str, Any]
    figures: dict[str, dict[str, Any]]
    curve_note: str
    previous_shot_id: str | None
    next_shot_id: str | None
    excluded_local: str = ""  # when the shot was excluded (empty: it is counted)


def _unknown_fields(payload: Mapping[str, Any], known_paths: set[str]) -> dict[str, Any]:
    """Fields of the posted body that the model does not read (kept verbatim)."""
    extra: dict[str, Any] = {}
    for key, value in (payload or {}).items():
        if key in ENVELOPE_KEYS:
            continue
        if key in model.SECTIONS and isinstance(value, Mapping):
            for sub, sub_value in value.items():
                if f"{key}.{sub}" not in known_paths:
                    extra[f"{key}.{sub}"] = sub_value
        else:
            extra[key] = value
    return extra


def _flatten(payload: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(payload, Mapping):
        out: dict[str, Any] = {}
        for key, value in payload.items():
            out.update(_flatten(value, f"{prefix}{key}."))
        return out
    return {prefix[:-1]: payload}


def revision_rows(revisions: Sequence[Any], campaign: Campaign) -> list[RevisionRow]:
    """Each revision with the fields it changed against the one before (newest first)."""
    rows = []
    before: dict[str, Any] = {}
    for rev in revisions:
        after = _flatten(rev.raw_payload or {})
        changes = (
            [
                (k, before.get(k), after.get(k))
                for k in sorted(set(before) | set(after))
                if before.get(k) != after.get(k)
            ]
            if before
            else []
        )
        rows.append(
            RevisionRow(
                rev.revision,
                local_text(rev.created_at, campaign_zone(campaign.timezone)),
                rev.author or "",
                rev.reason or "",
                changes,
            )
        )
        before = after
    return list(reversed(rows))


def shot_input_columns(shot: Shot) -> dict[str, Any]:
    """The shot's model inputs as one-row dotted-path columns (None -> NaN: absent)."""
    columns: dict[str, Any] = {}
    for spec in model.INPUT_FIELDS:
        value = getattr(shot, model.column_name(spec.path), None)
        if spec.kind == "enum":
            columns[spec.path] = [value]
        else:
            columns[spec.path] = [math.nan if value is None else float(value)]
    return columns


CURVE_POINTS = 80


def growth_curves(shot: Shot, settings: Mapping[str, Any]) -> dict[str, list[float | None]]:
    """δ(z) and N(z) along the plasma and N at the exit against ξ behind the seed, from the model's curve functions."""
    columns = shot_input_columns(shot)
    length = float(shot.plasma_length_m)
    z = np.linspace(length / CURVE_POINTS, length, CURVE_POINTS)
    along = model.growth_along_plasma(columns, z, settings)

    sigma_z = float(shot.driver_sigma_z_mm)
    seeded = shot.seed_method in model.SEEDED_METHODS
    zeta_s = float(shot.seed_position_mm) if seeded and shot.seed_position_mm is not None else 0.0
    xi_max = max(zeta_s + 3.0 * sigma_z, 0.5 * sigma_z)
    xi_mm = np.linspace(xi_max / CURVE_POINTS, xi_max, CURVE_POINTS)
    return {
        "z_m": z.tolist(),
        "efolds": along["efolds"].tolist(),
        "modulation": along["modulation"].tolist(),
        "xi_mm": xi_mm.tolist(),
        "efolds_exit_xi": model.efolds_along_bunch(columns, xi_mm * 1e-3, settings).tolist(),
    }


def growth_figure(
    curves: Mapping[str, list[Any]], shot: Shot, evaluation: Evaluation | None, delta_sat: float
) -> dict[str, Any]:
    z = rounded_list(curves["z_m"])
    modulation = rounded_list(curves["modulation"])
    efolds = rounded_list(curves["efolds"])
    z_sat = evaluation.saturation_length_m if evaluation is not None else None
    pairs = list(zip(z, modulation, strict=True))
    before = [m if z_sat is None or (zz is not None and zz <= z_sat) else None for zz, m in pairs]
    after = [m if z_sat is not None and zz is not None and zz >= z_sat else None for zz, m in pairs]
    traces: list[dict[str, Any]] = [
        {
            "type": "scatter",
            "mode": "lines",
            "x": z,
            "y": before,
            "name": "\u03b4(z) relative radius modulation",
            "line": {"color": OKABE_ITO["blue"], "width": 3},
            "hovertemplate": "z %{x:.3g} m<br>\u03b4 %{y:.3g}<extra></extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": z,
            "y": after,
            "name": "\u03b4(z) linear, past saturation (not valid)",
            "line": {"color": OKABE_ITO["blue"], "width": 2, "dash": "dot"},
            "hovertemplate": "z %{x:.3g} m<br>\u03b4 %{y:.3g}<extra></extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": [z[0], z[-1]],
            "y": [delta_sat, delta_sat],
            "name": f"saturation level \u03b4_sat = {delta_sat:g}",
            "line": {"color": OKABE_ITO["grey"], "dash": "dash"},
            "hoverinfo": "skip",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": z,
            "y": efolds,
            "name": "N(z) e-folds (right axis)",
            "yaxis": "y2",
            "line": {"color": OKABE_ITO["bluish_green"], "width": 2, "dash": "dashdot"},
            "hovertemplate": "z %{x:.3g} m<br>N %{y:.3g}<extra></extra>",
        },
    ]
    if z_sat is not None:
        traces.append(
            {
                "type": "scatter",
                "mode": "markers+text",
                "x": [rounded(z_sat)],
                "y": [delta_sat],
                "name": f"saturation at z = {z_sat:.3g} m",
                "text": [f"saturation {z_sat:.3g} m"],
                "textposition": "top left",
                "marker": {
                    "symbol": "star",
                    "size": 14,
                    "color": OKABE_ITO["vermillion"],
                    "line": {"color": INK, "width": 1},
                },
            }
        )
    figure_layout = layout(
        height=400,
        xaxis=axis("z along the plasma [m]"),
        yaxis=axis("\u03b4 (relative radius modulation)", type="log", exponentformat="power"),
        yaxis2=axis("N (e-folds)", overlaying="y", side="right", rangemode="tozero", showgrid=False, tickmode="auto"),
        margin={"l": 70, "r": 70, "t": 30, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


def efold_profile_figure(curves: Mapping[str, list[Any]], shot: Shot, settings: Mapping[str, Any]) -> dict[str, Any]:
    xi_ref = float(settings["reference_slice_sigma"]) * float(shot.driver_sigma_z_mm)
    ys = rounded_list(curves["efolds_exit_xi"])
    traces = [
        {
            "type": "scatter",
            "mode": "lines",
            "x": rounded_list(curves["xi_mm"]),
            "y": ys,
            "name": "N(L, \u03be) e-folds at the exit",
            "line": {"color": OKABE_ITO["reddish_purple"], "width": 3},
            "hovertemplate": "\u03be %{x:.3g} mm<br>N %{y:.3g}<extra></extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": [xi_ref, xi_ref],
            "y": [0, max([v for v in ys if v is not None] or [1])],
            "name": f"reference slice \u03be_ref = {xi_ref:.3g} mm",
            "line": {"color": OKABE_ITO["grey"], "dash": "dash"},
            "hoverinfo": "skip",
        },
    ]
    figure_layout = layout(
        height=360,
        xaxis=axis("\u03be behind the seed [mm]"),
        yaxis=axis("N at the plasma exit (e-folds)", rangemode="tozero"),
    )
    return {"data": traces, "layout": figure_layout}


def shot_detail(session: Session, campaign: Campaign, shot_id: str) -> ShotDetail | None:
    found = store.shot_with_evaluation(session, campaign.id, shot_id)
    if found is None:
        return None
    shot, evaluation = found
    known = {spec.path for spec in model.INPUT_FIELDS}
    defaulted = set(evaluation.defaulted_fields or []) if evaluation is not None else set()
    inputs = [
        InputRow(
            spec.path,
            getattr(shot, model.column_name(spec.path), None),
            spec.unit,
            spec.description,
            spec.range_text,
            spec.path in defaulted,
        )
        for spec in model.INPUT_FIELDS
    ]
    outputs = [
        OutputRow(name, getattr(evaluation, name, None) if evaluation else None, unit_of(name))
        for name in model.OUTPUT_NAMES
    ]
    flags = [FlagRow(f.code, f.severity, f.value, f.limit, f.message) for f in store.shot_flags(session, shot.id)]
    order = {severity: i for i, severity in enumerate(model.SEVERITIES)}
    flags.sort(key=lambda f: (order.get(f.severity, len(order)), f.code))
    settings = effective_settings(campaign)
    figures: dict[str, dict[str, Any]] = {}
    note = ""
    try:
        curves = growth_curves(shot, settings)
        figures["growth"] = growth_figure(curves, shot, evaluation, float(settings["saturation_modulation"]))
        figures["profile"] = efold_profile_figure(curves, shot, settings)
    except Exception as exc:  # a shot the model cannot draw still gets its page
        note = f"The growth curves could not be computed for this shot ({type(exc).__name__}: {exc})."
    previous_id, next_id = store.neighbour_shot_ids(session, campaign.id, shot)
    zone = campaign_zone(campaign.timezone)
    return ShotDetail(
        shot=shot,
        taken_local=local_text(shot.taken_at, zone),
        status=evaluation.status if evaluation else None,
        model_version=evaluation.model_version if evaluation else None,
        settings_version=evaluation.settings_version if evaluation else None,
        evaluated_local=local_text(evaluation.evaluated_at, zone) if evaluation else "",
        inputs=inputs,
        outputs=outputs,
        flags=flags,
        revisions=revision_rows(store.shot_revisions(session, shot.id), campaign),
        extra_fields=_unknown_fields(shot.raw_payload or {}, known),
        figures=figures,
        curve_note=note,
        previous_shot_id=previous_id,
        next_shot_id=next_id,
        excluded_local=local_text(shot.excluded_at, zone),
    )
