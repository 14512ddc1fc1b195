"""The planner page: where it starts (a stored shot's fields, two axes, outputs to draw) and the text of its
panels (the status map, the point clicked, the base's nominal windows, sensitivities and nearest nominal shot).

Every number the page shows is text from the one number formatter; boxes the user edits hold
``editable_number`` text (exact). The page's script only draws and fills in.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput
from app.presentation.fields import INPUTS_BY_PATH, field_label, unit_of, with_unit
from app.presentation.numbers import editable_number, format_delta, format_number
from app.presentation.palette import STATUS_STYLES
from app.services.planner import answers, figures
from app.services.planner.answers import ResolvedBase
from app.store import shots as shot_store
from app.tables import Campaign
from model import plan

MAP_STEPS = 80  # points per axis of the map the page starts with
CURVE_STEPS = 200  # points of a one-axis scan
DEBOUNCE_MS = 300  # the page waits this long after the last change before it asks again
DRAWN_OUTPUTS = tuple(f.name for f in model.OUTPUT_FIELDS if not f.measured_only)
PLANNED_FIELDS = tuple(f for f in model.INPUT_FIELDS if not f.path.startswith("measured."))
# The map's first axis and the second (the seed position for a seeded shot, else the population).
FIRST_AXIS = "plasma.density_cm3"
SECOND_AXES = ("seed.position_mm", "driver.population")
DEFAULT_VARY = ("plasma.density_cm3", "driver.population")
_NEEDED_FOR = {"species=ion": "ion driver only", "seeded": "seeded shots", "seed=electron_bunch": "electron seed only"}


@dataclass(frozen=True)
class BaseField:
    """One box of the base editor."""

    path: str
    unit: str
    kind: str  # "enum", "float" or "integer"
    choices: tuple[str, ...]
    value: str  # the box's text: exact, '' when the shot does not set it
    placeholder: str
    description: str
    range_text: str


@dataclass(frozen=True)
class AxisStart:
    field: str
    start: str
    stop: str
    steps: str
    log: bool


@dataclass
class PlanPage:
    shot_id: str | None
    revision: int | None
    status: str | None
    fields: list[BaseField]
    axis_fields: list[tuple[str, str]]  # (path, label) of every field the base can be scanned over
    axes: list[AxisStart | None]  # the first axis and the second (None: a one-axis scan)
    outputs: list[tuple[str, str]]  # (name, label) of every output the page can draw
    vary_fields: list[tuple[str, str]]  # positive fields the nearest nominal shot may vary
    vary: list[str]
    contour: str = figures.DEFAULT_CONTOUR
    curves: tuple[str, ...] = figures.DEFAULT_CURVES
    config: dict[str, Any] = field(default_factory=dict)


def _nice(value: float) -> float:
    """A range end to two significant digits (a round number the user reads at a glance)."""
    return float(f"{value:.2g}")


def axis_start(base: plan.PlanBase, path: str, steps: int) -> AxisStart | None:
    """A first range for an axis over ``path`` around the base value: a factor 3 each way on a log axis for
    a positive field, the span of the nominal-window search (model.plan.LINEAR_SPANS) for one that may be
    zero or negative; None when the base has no value for the field."""
    spec = INPUTS_BY_PATH[path]
    x0 = float(base.value(path))
    if not math.isfinite(x0):
        return None
    low = -math.inf if spec.minimum is None or spec.exclusive_minimum else spec.minimum
    high = math.inf if spec.maximum is None else spec.maximum
    if spec.kind == "integer":
        # halve and double, never crossing zero (an integer input here is a charge state: non-zero)
        start = max(low, math.floor(x0 / 2) if x0 < 0 else max(1, math.floor(x0 / 2)))
        stop = min(high, math.ceil(2 * x0)) if x0 > 0 else min(high, -1, math.ceil(2 * x0))
        steps = int(abs(stop - start)) + 1
        return AxisStart(path, editable_number(int(start)), editable_number(int(stop)), str(steps), False)
    if path in plan.LINEAR_SPANS:
        half_width, scale_of = plan.LINEAR_SPANS[path]
        span = half_width * scale_of(base, float(base.value("plasma.length_m")))
        start, stop, log = _nice(x0 - span), _nice(x0 + span), False
    elif x0 > 0:
        start, stop, log = _nice(x0 / 3), _nice(x0 * 3), True
    else:
        start, stop, log = x0, x0 + 1.0, False
    start, stop = max(start, low), min(stop, high)
    return AxisStart(path, editable_number(start), editable_number(stop), str(steps), log)


def _base_fields(payload: Mapping[str, Any] | None) -> list[BaseField]:
    rows = []
    for spec in PLANNED_FIELDS:
        section, name = spec.path.split(".", 1)
        block = (payload or {}).get(section)
        raw = block.get(name) if isinstance(block, Mapping) else None
        if spec.kind == "enum":
            value = raw if isinstance(raw, str) else ""
        else:
            value = editable_number(raw) if isinstance(raw, (int, float)) and not isinstance(raw, bool) else ""
        if spec.default is not None:
            placeholder = f"default {spec.default if spec.kind == 'enum' else format_number(spec.default)}"
        else:
            placeholder = _NEEDED_FOR.get(spec.needed_for, "required" if spec.required else "")
        rows.append(
            BaseField(
                spec.path, spec.unit, spec.kind, spec.choices, value, placeholder, spec.description, spec.range_text
            )
        )
    return rows


def plan_page(session: Session, campaign: Campaign, shot_id: str | None) -> PlanPage | None:
    """The page's start: the stored shot named (None when it does not exist), or the campaign's latest shot."""
    if shot_id:
        stored = shot_store.get_shot(session, campaign.id, shot_id)
    else:
        stored = shot_store.latest_shot(session, campaign.id)
    if shot_id and stored is None:
        return None
    evaluation = shot_store.get_evaluation(session, stored.id) if stored is not None else None
    page = PlanPage(
        shot_id=stored.shot_id if stored else None,
        revision=stored.revision if stored else None,
        status=evaluation.status if evaluation else None,
        fields=_base_fields(stored.raw_payload if stored else None),
        axis_fields=[(p, field_label(p)) for p in plan.SCANNABLE_FIELDS],
        axes=[None, None],
        outputs=[(name, with_unit(name, unit_of(name))) for name in DRAWN_OUTPUTS],
        vary_fields=[],
        vary=[],
    )
    defaults: dict[str, dict[str, Any]] = {}
    if stored is not None:
        try:
            base = plan.plan_base(stored.raw_payload)
        except model.PlanInputError:
            base = None  # a stored shot the model refuses: the boxes show it, the page names its problems
        if base is not None:
            for path in plan.SCANNABLE_FIELDS:
                start = axis_start(base, path, MAP_STEPS)
                if start is not None:
                    defaults[path] = {"start": start.start, "stop": start.stop, "steps": start.steps, "log": start.log}
            second = next((p for p in SECOND_AXES if p in defaults), None)
            page.axes = [
                axis_start(base, FIRST_AXIS, MAP_STEPS),
                axis_start(base, second, MAP_STEPS) if second else None,
            ]
            positive = plan.positive_fields_set(base)
            page.vary_fields = [(p, field_label(p)) for p in positive]
            page.vary = [p for p in DEFAULT_VARY if p in positive]
    page.config = {
        "shot_id": page.shot_id,
        "defaults": defaults,
        "curve_steps": str(CURVE_STEPS),
        "map_steps": str(MAP_STEPS),
        "debounce_ms": DEBOUNCE_MS,
    }
    return page


# ---------------------------------------------------------------------------------------------- feeds


def evaluation_view(evaluation: Mapping[str, Any]) -> dict[str, Any]:
    """An evaluation (``POST /evaluate``'s answer) as the page shows it: status, fired rules, outputs as text."""
    return {
        "status": evaluation["status"],
        "flags": [
            {
                "code": f["code"],
                "severity": f["severity"],
                "message": f["message"],
                "value": format_number(f["value"]),
                "limit": format_number(f["limit"]),
            }
            for f in evaluation["flags"]
        ],
        "outputs": [[name, format_number(evaluation.get(name), unit_of(name))] for name in DRAWN_OUTPUTS],
    }


def status_counts_text(result: plan.Scan) -> str:
    shape = " \u00d7 ".join(format_number(n) for n in result.shape)
    counts = [
        f"{format_number(int((result.status == rank).sum()))} {STATUS_STYLES[name].glyph} {name}"
        for rank, name in enumerate(model.STATUSES)
    ]
    return f"{shape} points: " + ", ".join(counts)


def map_view(
    base: ResolvedBase, axes: Sequence[Mapping[str, Any]], contour: str | None, curves: Sequence[str]
) -> dict[str, Any]:
    """The status map (two axes) or the curves (one axis), asking the model only for the outputs drawn."""
    drawn = ([contour] if contour else []) if len(axes) == 2 else list(curves)[: figures.MAX_CURVES]
    result = answers.scan(base, axes, drawn)
    spacings = [str(a.get("spacing", "linear")) for a in axes]
    planned = plan.plan_base(base.shot)
    base_values = [float(planned.value(a.field)) for a in result.axes]
    return {
        "figure": figures.scan_figure(result, spacings, base_values, contour, drawn),
        "summary": status_counts_text(result),
        "fields": [a.field for a in result.axes],
    }


def point_view(base: ResolvedBase, values: Mapping[str, Any]) -> dict[str, Any]:
    """The evaluation of one point of the map (the base with the clicked values)."""
    view = evaluation_view(answers.evaluate_point(base, values))
    view["values"] = [[field_label(p), format_number(v, digits=6)] for p, v in values.items()]
    return view


def _span_text(value: float, unit: str) -> str:
    return format_number(value, unit)


def window_rows(result: plan.Windows) -> list[dict[str, Any]]:
    """The nominal windows as table rows: field, base value, edges (— when not reached), rules beyond, a note."""
    rows = []
    for w in result.windows:
        notes = []
        if not w.found:
            notes.append(f"no nominal value from {_span_text(w.span_low, w.unit)} to {_span_text(w.span_high, w.unit)}")
        else:
            if not w.contains_base:
                notes.append("the base is not nominal: the nominal interval nearest to it")
            if w.low is None:
                notes.append(f"still nominal at {_span_text(w.span_low, w.unit)}, the low end of the span")
            if w.high is None:
                notes.append(f"still nominal at {_span_text(w.span_high, w.unit)}, the high end of the span")
        for side, problems in (("low", w.low_problems), ("high", w.high_problems)):
            notes += [f"{side} edge: beyond it {path} is {reason}" for path, reason in problems]
        rows.append(
            {
                "field": w.field,
                "unit": w.unit,
                "base": format_number(w.base),
                "low": format_number(w.low),
                "high": format_number(w.high),
                "low_rules": list(w.low_rules) or [f"range of {p}" for p, _ in w.low_problems],
                "high_rules": list(w.high_rules) or [f"range of {p}" for p, _ in w.high_problems],
                "note": "; ".join(notes),
            }
        )
    return rows


def sensitivity_rows(rows: Sequence[plan.SensitivityRow]) -> list[dict[str, Any]]:
    return [
        {
            "output": r.output,
            "field": r.field,
            "value": format_number(r.value, digits=3),
            "one_sided": "one-sided" if r.one_sided else "",
        }
        for r in rows
    ]


def nearest_view(base: ResolvedBase, vary: Sequence[str]) -> dict[str, Any]:
    """The nearest nominal shot varying ``vary``: what changes, its status, and exact texts for the boxes."""
    view: dict[str, Any] = {"vary": list(vary), "found": False, "problems": [], "changes": [], "inputs": {}}
    if not vary:
        view["note"] = "Choose one to four fields to vary."
        return view
    try:
        result = answers.nearest(base, vary)
    except InvalidInput as err:
        view["problems"] = [{"field": f, "reason": r} for f, r in err.problems]
        view["note"] = "These fields cannot be varied."
        return view
    if not result.found or result.status is None:
        view["note"] = "No nominal shot within a factor 10 of the base in these fields."
        return view
    planned = plan.plan_base(base.shot)
    view.update(
        found=True,
        distance=format_number(result.distance, digits=3),
        status=model.STATUSES[result.status],
        inputs={p: editable_number(v) for p, v in result.inputs.items()},
        note="The base is nominal already." if result.distance == 0 else "",
    )
    for path, value in result.inputs.items():
        x0 = float(planned.value(path))
        view["changes"].append(
            {
                "field": path,
                "unit": unit_of(path),
                "base": format_number(x0),
                "value": format_number(value),
                "change": format_delta(100.0 * (value / x0 - 1.0), "%"),
            }
        )
    return view


def panels_view(base: ResolvedBase, vary: Sequence[str]) -> dict[str, Any]:
    """Everything about the base itself: its evaluation, nominal windows, sensitivities and nearest nominal shot."""
    evaluation = answers.evaluate_point(base, {})
    return {
        "base": evaluation_view(evaluation),
        "windows": window_rows(answers.windows(base)),
        "sensitivities": sensitivity_rows(answers.sensitivities(base)),
        "nearest": nearest_view(base, vary),
    }
