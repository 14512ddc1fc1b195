"""The planner: the closed-form model over ranges of conditions around a base shot (MODEL.md sections 1-7).

Four questions about a base shot (a shot in the API JSON shape; its `measured` section,
`shot_id` and `taken_at` are dropped: a plan is about conditions, not measurements). The
caller passes the campaign settings (or None for DEFAULT_SETTINGS).

- scan(base, axes): one or two axes, each `{"field", "start", "stop", "steps", "spacing"}`
  over any numeric input of MODEL.md section 1 (SCANNABLE_FIELDS); values exactly
  numpy.linspace / numpy.geomspace; every grid point (row-major, the first axis slowest) is
  the base with those fields replaced, all in one evaluate_table call; at most
  MAX_SCAN_POINTS points. Values the model refuses are an error naming the axis end
  (`axes.0.start`), not clipped, including refusals of another field that the scanned one
  bounds (scanning sigma_z moves the limit |zeta_s| <= 10 sigma_z of the seed position):
  the ends of each axis and, for two axes, the four corners are validated shot by shot.
- nominal_windows(base, fields): for each field the connected interval of values around the
  base value (others fixed) where the status is nominal.
  * Positive fields (valid range >= 0 and a base value > 0): searched within a factor 10 of
    the base value each way, clipped to the field's valid range, on WINDOW_GRID_POINTS
    log-spaced points (plus the base value), each edge bisected (16 points per round) to
    EDGE_TOLERANCE in ln x, i.e. 1e-4 relative.
  * Fields that may be zero or negative: a linear span of LINEAR_SPANS around the base
    value (clipped to the valid range), edges to EDGE_TOLERANCE times the span's scale:
      seed.position_mm           +-2 sigma_z                      (scale sigma_z)
      plasma.gradient_pct_per_m  +-5 %/m                          (scale 1 %/m)
      driver.offset_x/y_mm       +-1 sigma_r                      (scale sigma_r)
      driver.angle_x/y_mrad      +-2 sigma_r / z_ref              (scale the same: the angle whose
                                 centroid excursion |angle| z_ref/2 of MODEL.md section 6 is one sigma_r)
  If the base is not nominal, the window is the nominal interval nearest to the base value
  (log distance for positive fields, absolute distance for linear ones) inside the span, or
  none (found False). An edge not reached inside the span is None. `low_rules` /
  `high_rules`: the codes that fire (marginal or outside) at the first point beyond the edge.
  A window end set by the valid range of another field (e.g. sigma_z below |zeta_s|/10)
  is an edge too: its rules are empty and `low_problems` / `high_problems` hold the
  validation problems (path, reason) of the point beyond it.
- nearest_nominal(base, vary): for 1-4 positive fields, the nominal point minimising
  sqrt(sum (x_i/x0_i - 1)^2) within the same factor-10 span. The nearest point of a region
  is the first point of it on its own ray from the base, so the search minimises that
  first-hit distance over ray directions: a coarse log grid (NEAREST_GRID_POINTS per field)
  gives the nearest nominal point of each orthant around the base; each such ray is
  bisected to its first nominal point, then turned over a grid of directions within an angle
  that halves (0.5 rad down to 0.01 rad, so the distance is within ~angle^2/2 = 5e-5 of the
  local minimum), and the winning ray is bisected to 1e-4. `found` False when no grid point
  of the span is nominal (a nominal region thinner than the coarse grid step, 1/14 of the
  span's decades for 4 fields and 1/800 for one, can be missed).
- plan_sensitivities(base): d ln q/d ln x of PLAN_SENSITIVITY_OUTPUTS with respect to every
  positive numeric input the base sets (model.sensitivity.log_sensitivities, +-0.1 %),
  rows sorted by |value|, largest first, NaN (no derivative) last.

Bad requests raise PlanInputError whose `.problems` list (path, reason) with paths such as
`base.plasma.density_cm3`, `axes.0.start`, `axes.1.field`, `outputs.2`, `fields.0`, `vary.2`.
Statuses and severities are ranks (model.STATUSES, model.SEVERITY_BY_RANK) in every result.
"""

from __future__ import annotations

import copy
import itertools
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, TypeGuard

import numpy as np

from model.evaluate import evaluate_table
from model.inputs import FIELDS_BY_PATH, INPUT_FIELDS, InputField, ShotInputError, clean_shot_columns, refused_rows
from model.rules import FLAG_CODES, resolve_settings
from model.sensitivity import evaluate_where_valid, log_sensitivities
from model.vocabulary import OUTPUT_FIELDS, OUTPUTS_BY_NAME, SEEDED_METHODS, SEVERITY_BY_RANK, STATUSES

MAX_SCAN_POINTS = 250_000
DROPPED_KEYS = ("measured", "shot_id", "taken_at")
# Every numeric input of MODEL.md section 1 except the measured diagnostics (a plan has no measurements).
SCANNABLE_FIELDS: tuple[str, ...] = tuple(
    f.path for f in INPUT_FIELDS if f.kind != "enum" and not f.path.startswith("measured.")
)
PLAN_SENSITIVITY_OUTPUTS: tuple[str, ...] = (
    "efolds_exit",
    "saturation_length_m",
    "phase_slip_rad",
    "density_tolerance_pct",
    "wakefield_estimate_mv_m",
)
SPAN_FACTOR = 10.0
WINDOW_GRID_POINTS = 321
EDGE_TOLERANCE = 1e-4
NEAREST_GRID_POINTS = {1: 801, 2: 201, 3: 35, 4: 15}  # per varied field: 801 ... 50,625 coarse points
_DIRECTION_POINTS = {2: 9, 3: 5, 4: 5}  # ray directions per tangent axis and turn: 9, 25, 125 rays
_FIRST_ANGLE, _LAST_ANGLE, _MAX_TURNS = 0.5, 0.01, 40  # rad: turns stop below _LAST_ANGLE (t error ~ angle^2/2)
_SUBDIVISIONS = 16  # points per bracket and bisection round: 15 new points, the bracket shrinks 16x
_NOMINAL = STATUSES.index("nominal")
_MARGINAL_RANK = SEVERITY_BY_RANK.index("marginal")


class PlanInputError(ShotInputError):
    """A plan request the planner cannot answer; `.problems` lists (path, reason), e.g. ("axes.0.start", ...)."""

    def __init__(self, problems: Sequence[tuple[str, str]]):
        self.problems = list(problems)
        text = "; ".join(f"{path}: {reason}" for path, reason in self.problems)
        ValueError.__init__(self, f"invalid plan ({len(self.problems)} problem(s)): {text}")


# ---------------------------------------------------------------------------------------------- the base


@dataclass(frozen=True)
class PlanBase:
    """A validated base: the shot without measurements and its one-row clean columns (defaults filled)."""

    shot: dict[str, Any]
    columns: Mapping[str, np.ndarray]

    def value(self, path: str) -> Any:
        return self.columns[path][0]


def plan_base(shot: Mapping[str, Any] | PlanBase) -> PlanBase:
    """The base of a plan: `measured`, `shot_id` and `taken_at` dropped, validated (problems named `base.<path>`)."""
    if isinstance(shot, PlanBase):
        return shot
    if not isinstance(shot, Mapping):
        raise PlanInputError([("base", "not an object")])
    kept = {key: copy.deepcopy(value) for key, value in shot.items() if key not in DROPPED_KEYS}
    try:
        columns = clean_shot_columns(kept)
    except ShotInputError as err:
        raise PlanInputError([(f"base.{path}", reason) for path, reason in err.problems]) from None
    return PlanBase(kept, columns)


def _with_values(base: PlanBase, values: Mapping[str, float]) -> dict[str, Any]:
    """The base shot with some input fields replaced (API JSON shape)."""
    shot = copy.deepcopy(base.shot)
    for path, value in values.items():
        section, name = path.split(".", 1)
        block = shot.get(section)
        shot[section] = dict(block) if isinstance(block, Mapping) else {}
        shot[section][name] = float(value)
    return shot


def _problems_at(base: PlanBase, values: Mapping[str, float]) -> list[tuple[str, str]]:
    """The model's validation problems of the base with these values (empty when valid)."""
    try:
        clean_shot_columns(_with_values(base, values))
    except ShotInputError as err:
        return err.problems
    return []


def _variant_columns(base: PlanBase, overrides: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Columns of the base (one value, broadcast by the model) with some fields replaced by whole columns."""
    return {
        path: overrides[path] if path in overrides else values[0:1].reshape(()) for path, values in base.columns.items()
    }


def _used_by(base: PlanBase, f: InputField) -> bool:
    """Whether the base's species and seed method use the field (MODEL.md section 1: 'only for ...')."""
    species, method = base.value("driver.species"), base.value("seed.method")
    uses = {
        "species=ion": species == "ion",
        "seeded": method in SEEDED_METHODS,
        "seed=electron_bunch": method == "electron_bunch",
    }
    return uses.get(f.needed_for, True)


def _field_problem(base: PlanBase, path: Any) -> str | None:
    """Why a path cannot be planned over, or None."""
    if not isinstance(path, str) or path not in FIELDS_BY_PATH:
        return f"unknown input field {path!r} (numeric inputs: {', '.join(SCANNABLE_FIELDS)})"
    if FIELDS_BY_PATH[path].kind == "enum":
        return f"{path} is not a numeric input"
    if path not in SCANNABLE_FIELDS:
        return f"{path} is a measured value, and a plan drops the measurements"
    if not _used_by(base, FIELDS_BY_PATH[path]):
        return (
            f"{path} is not used by this base (driver.species {base.value('driver.species')!r}, "
            f"seed.method {base.value('seed.method')!r})"
        )
    return None


def _is_positive(base: PlanBase, path: str) -> bool:
    """A positive field: never negative by its valid range, not an integer, and > 0 in the base."""
    f = FIELDS_BY_PATH[path]
    value = base.value(path)
    return f.kind == "float" and f.minimum is not None and f.minimum >= 0.0 and bool(value > 0.0)


def _set_by(base: PlanBase, path: str) -> bool:
    section, name = path.split(".", 1)
    block = base.shot.get(section)
    return isinstance(block, Mapping) and block.get(name) is not None


def positive_fields_set(base: Mapping[str, Any] | PlanBase) -> list[str]:
    """Every positive numeric input the base sets and uses, in MODEL.md section 1 order."""
    b = plan_base(base)
    return [p for p in SCANNABLE_FIELDS if _set_by(b, p) and _field_problem(b, p) is None and _is_positive(b, p)]


def _static_range(f: InputField) -> tuple[float, float]:
    low = -math.inf if f.minimum is None else f.minimum
    high = math.inf if f.maximum is None else f.maximum
    return low, high


def _base_status(base: PlanBase, settings: Mapping[str, Any]) -> tuple[int, Mapping[str, np.ndarray]]:
    table = evaluate_table(_variant_columns(base, {}), settings)
    return int(table["status"][0]), table


# ---------------------------------------------------------------------------------------------- scan


@dataclass(frozen=True)
class Axis:
    """One scan axis; values exactly numpy.linspace(start, stop, steps) or numpy.geomspace(...) for spacing 'log'."""

    field: str
    start: float
    stop: float
    steps: int
    spacing: str = "linear"

    def values(self) -> np.ndarray:
        spaced = np.geomspace if self.spacing == "log" else np.linspace
        return spaced(self.start, self.stop, self.steps)


def _finite_number(value: Any) -> TypeGuard[float]:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _parse_axis(raw: Any, i: int, base: PlanBase) -> tuple[Axis | None, list[tuple[str, str]]]:
    where = f"axes.{i}"
    if isinstance(raw, Axis):
        raw = {"field": raw.field, "start": raw.start, "stop": raw.stop, "steps": raw.steps, "spacing": raw.spacing}
    if not isinstance(raw, Mapping):
        return None, [(where, "not an object with field, start, stop, steps and spacing")]
    problems: list[tuple[str, str]] = []
    field = raw.get("field")
    if (reason := _field_problem(base, field)) is not None:
        problems.append((f"{where}.field", reason))
    for end in ("start", "stop"):
        if not _finite_number(raw.get(end)):
            problems.append((f"{where}.{end}", f"must be a finite number, got {raw.get(end)!r}"))
    steps = raw.get("steps")
    if isinstance(steps, float) and steps.is_integer():
        steps = int(steps)
    if not isinstance(steps, int) or isinstance(steps, bool) or steps < 1:
        problems.append((f"{where}.steps", f"must be an integer >= 1, got {raw.get('steps')!r}"))
        steps = 0
    spacing = raw.get("spacing", "linear")
    if spacing not in ("linear", "log"):
        problems.append((f"{where}.spacing", f"must be 'linear' or 'log', got {spacing!r}"))
    elif spacing == "log":
        for end in ("start", "stop"):
            value = raw.get(end)
            if _finite_number(value) and value <= 0:
                problems.append((f"{where}.{end}", f"log spacing needs start and stop > 0, got {value!r}"))
    if problems:
        return None, problems
    return Axis(str(field), float(raw["start"]), float(raw["stop"]), int(steps), str(spacing)), []


def _ends_and_corners(base: PlanBase, axes: Sequence[Axis]) -> dict[str, np.ndarray]:
    """Columns of the axis fields at both ends of each axis (the others at the base) and, for two axes,
    at the four corners: the points _range_problems checks one by one."""
    ends = [np.array([a.start, a.stop], dtype=float) for a in axes]
    if len(axes) == 1:
        return {axes[0].field: ends[0]}
    a, b = axes
    at_base = [np.full(2, float(base.value(f.field))) for f in axes]
    return {
        a.field: np.concatenate([ends[0], at_base[0], np.repeat(ends[0], 2)]),
        b.field: np.concatenate([at_base[1], ends[1], np.tile(ends[1], 2)]),
    }


def _range_problems(base: PlanBase, axes: Sequence[Axis]) -> list[tuple[str, str]]:
    """Validate the ends of each axis and, for two axes, the corners, naming the axis end that is refused."""

    def explain(path: str, reason: str, axis: Axis) -> str:
        return reason if path == axis.field else f"makes {path} {reason}"

    problems: list[tuple[str, str]] = []
    for i, axis in enumerate(axes):
        if FIELDS_BY_PATH[axis.field].kind == "integer":
            values = axis.values()
            if not np.all(values == np.round(values)):
                problems.append((f"axes.{i}.steps", f"{axis.field} takes integers; these steps give fractions"))
    if not problems and not refused_rows(_variant_columns(base, _ends_and_corners(base, axes))).any():
        return []  # one batched check of every end and corner; the per-point one below names the refusal
    for i, axis in enumerate(axes):
        for end in ("start", "stop"):
            value = getattr(axis, end)
            for path, reason in _problems_at(base, {axis.field: value}):
                problems.append((f"axes.{i}.{end}", f"{axis.field} = {value:g}: {explain(path, reason, axis)}"))
    if problems or len(axes) < 2:
        return problems
    a, b = axes
    for end_a, end_b in itertools.product(("start", "stop"), repeat=2):
        va, vb = getattr(a, end_a), getattr(b, end_b)
        for path, reason in _problems_at(base, {a.field: va, b.field: vb}):
            text = f"{a.field} = {va:g} with {b.field} = {vb:g}: makes {path} {reason}"
            problems += [(f"axes.0.{end_a}", text), (f"axes.1.{end_b}", text)]
    return problems


def _output_names(outputs: Sequence[str] | None) -> tuple[list[str], list[tuple[str, str]]]:
    if outputs is None:
        return [f.name for f in OUTPUT_FIELDS if not f.measured_only], []
    if isinstance(outputs, str) or not isinstance(outputs, Sequence):
        return [], [("outputs", "must be a list of output names")]
    problems = []
    for i, name in enumerate(outputs):
        if not isinstance(name, str) or name not in OUTPUTS_BY_NAME:
            problems.append((f"outputs.{i}", f"unknown output {name!r}"))
        elif OUTPUTS_BY_NAME[name].measured_only:
            problems.append((f"outputs.{i}", f"{name} needs a measured frequency, which a plan does not have"))
    return list(outputs), problems


@dataclass(frozen=True)
class ScanAxis:
    field: str
    unit: str
    values: np.ndarray


@dataclass(frozen=True)
class Scan:
    """A scan: flat row-major arrays (the first axis varies slowest) of len(axes[0].values) x ... points."""

    axes: tuple[ScanAxis, ...]
    shape: tuple[int, ...]
    status: np.ndarray  # int8 status ranks (model.STATUSES)
    outputs: dict[str, np.ndarray]  # output name -> float array, NaN for null
    flags: dict[str, np.ndarray]  # flag code -> int8 severity ranks (model.SEVERITY_BY_RANK; 0 = not fired)


def scan(
    base: Mapping[str, Any] | PlanBase,
    axes: Sequence[Axis | Mapping[str, Any]],
    settings: Mapping[str, Any] | None = None,
    outputs: Sequence[str] | None = None,
) -> Scan:
    """Evaluate the base over a 1-D or 2-D grid of input values in one evaluate_table call (MODEL.md sections 2-7)."""
    b = plan_base(base)
    problems: list[tuple[str, str]] = []
    parsed: list[Axis] = []
    if isinstance(axes, (str, Mapping)) or not isinstance(axes, Sequence) or not 1 <= len(axes) <= 2:
        problems.append(("axes", "give one or two axes"))
    else:
        for i, raw in enumerate(axes):
            axis, axis_problems = _parse_axis(raw, i, b)
            problems += axis_problems
            if axis is not None:
                parsed.append(axis)
        if len(parsed) == 2 and parsed[0].field == parsed[1].field:
            problems.append(("axes.1.field", f"{parsed[1].field} is already axis 0"))
    names, output_problems = _output_names(outputs)
    problems += output_problems
    if not problems and math.prod(a.steps for a in parsed) > MAX_SCAN_POINTS:
        sizes = " x ".join(str(a.steps) for a in parsed)
        problems.append(("axes", f"at most {MAX_SCAN_POINTS:,} points, got {sizes}"))
    if not problems:
        problems = _range_problems(b, parsed)
    if problems:
        raise PlanInputError(problems)

    settings = resolve_settings(settings)
    values = [a.values() for a in parsed]
    shape = tuple(v.size for v in values)
    if len(values) == 1:
        overrides = {parsed[0].field: values[0]}
    else:
        overrides = {parsed[0].field: np.repeat(values[0], shape[1]), parsed[1].field: np.tile(values[1], shape[0])}
    try:
        table = evaluate_table(_variant_columns(b, overrides), settings)
    except ShotInputError as err:  # a refusal inside the grid that neither its ends nor its corners showed
        by_field = {a.field: f"axes.{i}" for i, a in enumerate(parsed)}
        raise PlanInputError(
            [(by_field.get(path, "axes"), f"{path}: {reason}") for path, reason in err.problems]
        ) from None
    return Scan(
        axes=tuple(ScanAxis(a.field, FIELDS_BY_PATH[a.field].unit, v) for a, v in zip(parsed, values, strict=True)),
        shape=shape,
        status=table["status"],
        outputs={name: table[name] for name in names},
        flags={code: table["flag." + code] for code in FLAG_CODES},
    )


# ---------------------------------------------------------------------------------------------- bisection


def _refine(
    t_in: np.ndarray, t_out: np.ndarray, tolerance: np.ndarray, inside: Callable[[np.ndarray, np.ndarray], np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Shrink brackets (t_in inside, t_out not) of a 1-D parameter to |t_out - t_in| <= tolerance.

    `inside(bracket indices (k,), points (k, m))` -> bool (k, m); each round puts 15 points between the
    ends of every open bracket and keeps the first change from inside, walking from t_in.
    """
    t_in, t_out = t_in.astype(float), t_out.astype(float)
    fractions = np.arange(1, _SUBDIVISIONS) / _SUBDIVISIONS
    while True:
        active = np.nonzero(np.abs(t_out - t_in) > tolerance)[0]
        if active.size == 0:
            return t_in, t_out
        points = t_in[active, None] + (t_out - t_in)[active, None] * fractions
        ok = inside(active, points)
        first_out = np.where((~ok).any(axis=1), np.argmax(~ok, axis=1), fractions.size)
        rows = np.arange(active.size)
        extended = np.concatenate([t_in[active, None], points, t_out[active, None]], axis=1)
        t_in[active] = extended[rows, first_out]
        t_out[active] = extended[rows, first_out + 1]


def _fired(table: Mapping[str, np.ndarray], row: int) -> tuple[str, ...]:
    """Rule codes at marginal or outside severity in one row."""
    return tuple(code for code in FLAG_CODES if table["flag." + code][row] >= _MARGINAL_RANK)


# ---------------------------------------------------------------------------------------------- windows


def _seed_scale(base: PlanBase, z_ref_m: float) -> float:
    return float(base.value("driver.sigma_z_mm"))


def _gradient_scale(base: PlanBase, z_ref_m: float) -> float:
    return 1.0


def _offset_scale(base: PlanBase, z_ref_m: float) -> float:
    return float(base.value("driver.sigma_r_mm"))


def _angle_scale(base: PlanBase, z_ref_m: float) -> float:
    return 2.0 * float(base.value("driver.sigma_r_mm")) / z_ref_m  # mm / m = mrad


# Fields that may be zero or negative: (half-width of the span in scales, scale from the base and z_ref in m).
LINEAR_SPANS: dict[str, tuple[float, Callable[[PlanBase, float], float]]] = {
    "seed.position_mm": (2.0, _seed_scale),
    "plasma.gradient_pct_per_m": (5.0, _gradient_scale),
    "driver.offset_x_mm": (1.0, _offset_scale),
    "driver.offset_y_mm": (1.0, _offset_scale),
    "driver.angle_x_mrad": (1.0, _angle_scale),
    "driver.angle_y_mrad": (1.0, _angle_scale),
}


@dataclass(frozen=True)
class Window:
    """The nominal interval of one field around the base value (others fixed)."""

    field: str
    unit: str
    base: float
    spacing: str  # "log": factor-10 span; "linear": the span of LINEAR_SPANS
    span_low: float  # the searched span, clipped to the field's valid range
    span_high: float
    found: bool  # a nominal interval exists in the span
    contains_base: bool  # ... and the base value is in it
    low: float | None  # None: not reached inside the span (or no window)
    high: float | None
    low_rules: tuple[str, ...]  # codes firing just beyond the edge
    high_rules: tuple[str, ...]
    low_problems: tuple[tuple[str, str], ...] = ()  # validation problems just beyond an edge set by another field
    high_problems: tuple[tuple[str, str], ...] = ()


@dataclass(frozen=True)
class Windows:
    base_status: int  # status rank of the base
    windows: tuple[Window, ...]


@dataclass(frozen=True)
class _Search:
    """One field's window search: parameter t = ln x (log) or x (linear)."""

    path: str
    log: bool
    x0: float
    low: float
    high: float
    tolerance: float

    def t(self, x: Any) -> Any:
        return np.log(x) if self.log else np.asarray(x, dtype=float)

    def x(self, t: Any) -> Any:
        """The value at t: inside the span despite rounding (exp(ln x) may not be x), the base value exactly."""
        x = np.clip(np.exp(t) if self.log else np.asarray(t, dtype=float), self.low, self.high)
        return np.where(t == self.t(self.x0), self.x0, x)


def _window_search(base: PlanBase, path: str, z_ref_m: float) -> _Search:
    f = FIELDS_BY_PATH[path]
    x0 = float(base.value(path))
    low, high = _static_range(f)
    if _is_positive(base, path):
        return _Search(path, True, x0, max(x0 / SPAN_FACTOR, low), min(x0 * SPAN_FACTOR, high), EDGE_TOLERANCE)
    half_width, scale_of = LINEAR_SPANS[path]
    scale = scale_of(base, z_ref_m)
    span = half_width * scale
    return _Search(path, False, x0, max(x0 - span, low), min(x0 + span, high), EDGE_TOLERANCE * scale)


def _window_fields(base: PlanBase, fields: Sequence[str] | None) -> list[str]:
    if fields is None:
        return positive_fields_set(base)
    if isinstance(fields, str) or not isinstance(fields, Sequence) or not fields:
        raise PlanInputError([("fields", "must be a non-empty list of input paths")])
    problems = []
    for i, path in enumerate(fields):
        if (reason := _field_problem(base, path)) is not None:
            problems.append((f"fields.{i}", reason))
        elif path in fields[:i]:
            problems.append((f"fields.{i}", f"{path} is listed twice"))
        elif not _is_positive(base, path) and path not in LINEAR_SPANS:
            problems.append(
                (f"fields.{i}", f"{path} = {base.value(path)!r} in the base: no window (not a positive field)")
            )
    if problems:
        raise PlanInputError(problems)
    return list(fields)


def _evaluate_one_field_changes(
    base: PlanBase, searches: Sequence[_Search], which: np.ndarray, values: np.ndarray, settings: Mapping[str, Any]
) -> tuple[np.ndarray, Mapping[str, np.ndarray]]:
    """Evaluate rows that each change one field of the base: row r sets searches[which[r]].path = values[r]."""
    overrides: dict[str, np.ndarray] = {}
    for k, search in enumerate(searches):
        rows = which == k
        if rows.any():
            column = overrides.setdefault(search.path, np.full(values.size, search.x0))
            column[rows] = values[rows]
    return evaluate_where_valid(_variant_columns(base, overrides), settings)


def _nominal_run(nominal: np.ndarray, t: np.ndarray, i0: int) -> tuple[int, int] | None:
    """(first, last) grid index of the nominal run holding i0, or of the run nearest to t[i0]; None if no run."""
    if nominal[i0]:
        first, last = i0, i0
        while first > 0 and nominal[first - 1]:
            first -= 1
        while last < nominal.size - 1 and nominal[last + 1]:
            last += 1
        return first, last
    edges = np.diff(np.concatenate([[0], nominal.astype(np.int8), [0]]))
    starts, stops = np.nonzero(edges == 1)[0], np.nonzero(edges == -1)[0] - 1
    if starts.size == 0:
        return None
    distance = np.where(t[stops] < t[i0], t[i0] - t[stops], t[starts] - t[i0])
    best = int(np.argmin(distance))
    return int(starts[best]), int(stops[best])


def nominal_windows(
    base: Mapping[str, Any] | PlanBase, fields: Sequence[str] | None = None, settings: Mapping[str, Any] | None = None
) -> Windows:
    """The nominal window of each field (default: every positive numeric input the base sets); see the module doc."""
    b = plan_base(base)
    paths = _window_fields(b, fields)
    settings = resolve_settings(settings)
    base_status, base_table = _base_status(b, settings)
    saturation = float(base_table["saturation_length_m"][0])
    z_ref_m = saturation if math.isfinite(saturation) else float(b.value("plasma.length_m"))
    searches = [_window_search(b, path, z_ref_m) for path in paths]
    if not searches:
        return Windows(base_status, ())

    grids = []
    for s in searches:
        t = np.linspace(s.t(s.low), s.t(s.high), WINDOW_GRID_POINTS)
        grids.append(np.unique(np.concatenate([t, [s.t(s.x0)]])))
    which = np.concatenate([np.full(g.size, k) for k, g in enumerate(grids)])
    values = np.concatenate([s.x(g) for s, g in zip(searches, grids, strict=True)])
    _, table = _evaluate_one_field_changes(b, searches, which, values, settings)
    nominal_rows = table["status"] == _NOMINAL

    # Brackets (t inside, t beyond) of every window edge reached inside its span: side 0 low, 1 high.
    runs: list[tuple[int, int] | None] = []
    bracket_field, bracket_side, t_in, t_out = [], [], [], []
    offset = 0
    for k, (s, g) in enumerate(zip(searches, grids, strict=True)):
        nominal = nominal_rows[offset : offset + g.size]
        offset += g.size
        run = _nominal_run(nominal, g, int(np.searchsorted(g, s.t(s.x0))))
        runs.append(run)
        if run is None:
            continue
        first, last = run
        for side, inner, outer in ((0, first, first - 1), (1, last, last + 1)):
            if 0 <= outer < g.size:
                bracket_field.append(k)
                bracket_side.append(side)
                t_in.append(g[inner])
                t_out.append(g[outer])
    fields_of = np.array(bracket_field, dtype=int)

    def inside(active: np.ndarray, points: np.ndarray) -> np.ndarray:
        k_rows = np.repeat(fields_of[active], points.shape[1])
        flat = points.ravel()
        x = np.empty_like(flat)
        for k in np.unique(k_rows):
            x[k_rows == k] = searches[k].x(flat[k_rows == k])
        _, table = _evaluate_one_field_changes(b, searches, k_rows, x, settings)
        return (table["status"] == _NOMINAL).reshape(points.shape)

    # Per (field, side): the edge value (nominal), the rules firing just beyond it, validation problems there.
    edges: dict[tuple[int, int], tuple[float | None, tuple[str, ...], tuple[tuple[str, str], ...]]] = {}
    if bracket_field:
        tolerance = np.array([searches[k].tolerance for k in bracket_field])
        edge_in, edge_out = _refine(np.array(t_in), np.array(t_out), tolerance, inside)
        x_in = [float(searches[k].x(t)) for k, t in zip(bracket_field, edge_in, strict=True)]
        x_out = np.array([searches[k].x(t) for k, t in zip(bracket_field, edge_out, strict=True)])
        valid_beyond, beyond = _evaluate_one_field_changes(b, searches, fields_of, x_out, settings)
        for j, (k, side) in enumerate(zip(bracket_field, bracket_side, strict=True)):
            if valid_beyond[j]:
                edges[(k, side)] = (x_in[j], _fired(beyond, j), ())
            else:
                edges[(k, side)] = (x_in[j], (), tuple(_problems_at(b, {searches[k].path: float(x_out[j])})))
    no_edge: tuple[float | None, tuple[str, ...], tuple[tuple[str, str], ...]] = (None, (), ())
    windows = []
    for k, s in enumerate(searches):
        run = runs[k]
        low, high = edges.get((k, 0), no_edge), edges.get((k, 1), no_edge)
        contains = run is not None and base_status == _NOMINAL  # the base value is a grid point
        windows.append(
            Window(
                field=s.path,
                unit=FIELDS_BY_PATH[s.path].unit,
                base=s.x0,
                spacing="log" if s.log else "linear",
                span_low=s.low,
                span_high=s.high,
                found=run is not None,
                contains_base=contains,
                low=low[0],
                high=high[0],
                low_rules=low[1],
                high_rules=high[1],
                low_problems=low[2],
                high_problems=high[2],
            )
        )
    return Windows(base_status, tuple(windows))


# ---------------------------------------------------------------------------------------------- nearest


@dataclass(frozen=True)
class Nearest:
    """The nominal point nearest to the base in sqrt(sum (x_i/x0_i - 1)^2) over the varied fields."""

    found: bool
    distance: float | None
    inputs: dict[str, float]  # varied path -> value (empty when not found)
    shot: dict[str, Any] | None  # the base with those values, API JSON shape (evaluate_shot gives its evaluation)
    status: int | None  # status rank
    evaluation: dict[str, Any] | None  # its table row: outputs (NaN = null), "status", "flag.<CODE>" ranks, ...


def _vary_fields(base: PlanBase, vary: Sequence[str]) -> list[str]:
    if isinstance(vary, str) or not isinstance(vary, Sequence) or not 1 <= len(vary) <= 4:
        raise PlanInputError([("vary", "give 1 to 4 input paths to vary")])
    problems = []
    for i, path in enumerate(vary):
        if (reason := _field_problem(base, path)) is not None:
            problems.append((f"vary.{i}", reason))
        elif path in vary[:i]:
            problems.append((f"vary.{i}", f"{path} is listed twice"))
        elif not _is_positive(base, path):
            problems.append(
                (f"vary.{i}", f"{path} = {base.value(path)!r} in the base: only positive fields are varied")
            )
    if problems:
        raise PlanInputError(problems)
    return list(vary)


def _tangent_basis(u: np.ndarray) -> np.ndarray:
    """(k, d-1, d): orthonormal bases of the planes perpendicular to the unit vectors u (k, d)."""
    d = u.shape[1]
    # QR of [u, I]: the first column spans u, the next d-1 columns its orthogonal complement.
    q = np.linalg.qr(np.concatenate([u[:, :, None], np.broadcast_to(np.eye(d), (u.shape[0], d, d))], axis=2))[0]
    return np.swapaxes(q[:, :, 1:d], 1, 2)


def nearest_nominal(
    base: Mapping[str, Any] | PlanBase, vary: Sequence[str], settings: Mapping[str, Any] | None = None
) -> Nearest:
    """The nearest nominal shot varying 1-4 positive fields within a factor 10 of the base; see the module doc."""
    b = plan_base(base)
    paths = _vary_fields(b, vary)
    settings = resolve_settings(settings)
    d = len(paths)
    x0 = np.array([float(b.value(p)) for p in paths])
    ranges = [_static_range(FIELDS_BY_PATH[p]) for p in paths]
    low = np.array([max(x / SPAN_FACTOR, r[0]) for x, r in zip(x0, ranges, strict=True)])
    high = np.array([min(x * SPAN_FACTOR, r[1]) for x, r in zip(x0, ranges, strict=True)])
    y_low, y_high = low / x0 - 1.0, high / x0 - 1.0

    def point(y: np.ndarray) -> np.ndarray:
        """x = x0 (1 + y) for y of shape (points, d) (clipped to the span against rounding; the base value exactly)."""
        return np.where(y == 0.0, x0, np.clip(x0 * (1.0 + y), low, high))

    def nominal_at(y: np.ndarray) -> tuple[np.ndarray, Mapping[str, np.ndarray]]:
        """Nominal and inside the span, for points y of shape (points, d)."""
        slack = 1e-12 * (1.0 + np.abs(y))
        in_span = np.all((y >= y_low - slack) & (y <= y_high + slack), axis=1)
        x = point(y)
        _, table = evaluate_where_valid(_variant_columns(b, {p: x[:, i] for i, p in enumerate(paths)}), settings)
        return (table["status"] == _NOMINAL) & in_span, table

    def first_hits(u: np.ndarray, reach: np.ndarray, tolerance: np.ndarray) -> np.ndarray:
        """Distance t of the first nominal point y = t u along each ray, t in (0, reach], to `tolerance` (inf: none)."""
        s = np.arange(1, _SUBDIVISIONS + 1) / _SUBDIVISIONS
        t = reach[:, None] * s
        ok = nominal_at((t[:, :, None] * u[:, None, :]).reshape(-1, d))[0].reshape(t.shape)
        hit = ok.any(axis=1)
        j = np.argmax(ok, axis=1)
        rows = np.nonzero(hit)[0]
        t_in = np.where(j[rows] > 0, t[rows, np.maximum(j[rows] - 1, 0)], 0.0)

        def not_nominal(active: np.ndarray, points: np.ndarray) -> np.ndarray:
            y = points[:, :, None] * u[rows[active]][:, None, :]
            return ~nominal_at(y.reshape(-1, d))[0].reshape(points.shape)

        _, t_out = _refine(t_in, t[rows, j[rows]], tolerance[rows], not_nominal)
        distance = np.full(u.shape[0], np.inf)
        distance[rows] = t_out
        return distance

    def result(y: np.ndarray) -> Nearest:
        _, table = nominal_at(y[None, :])
        x = point(y[None, :])[0]
        inputs = {p: float(v) for p, v in zip(paths, x, strict=True)}
        row = {key: column[0].item() for key, column in table.items()}
        distance = float(np.linalg.norm(x / x0 - 1.0))
        return Nearest(True, distance, inputs, _with_values(b, inputs), int(row["status"]), row)

    if nominal_at(np.zeros((1, d)))[0][0]:
        return result(np.zeros(d))

    # 1. Coarse log grid over the span (with the base value on every axis).
    n = NEAREST_GRID_POINTS[d]
    axes = [
        np.unique(np.concatenate([np.geomspace(lo, hi, n), [x]])) / x - 1.0
        for lo, hi, x in zip(low, high, x0, strict=True)
    ]
    y = np.stack([g.ravel() for g in np.meshgrid(*axes, indexing="ij")], axis=1)
    ok, _ = nominal_at(y)
    if not ok.any():
        return Nearest(False, None, {}, None, None, None)
    y, distance = y[ok], np.linalg.norm(y[ok], axis=1)

    # 2. Candidates: the nearest nominal grid point of each orthant around the base, if within twice the best;
    #    each moved to the first nominal point on its ray from the base.
    orthant = (y >= 0.0) @ (1 << np.arange(d))
    order = np.argsort(distance, kind="stable")
    _, first = np.unique(orthant[order], return_index=True)
    chosen = order[first][distance[order[first]] <= 2.0 * distance.min()]
    u = y[chosen] / distance[chosen, None]
    best = first_hits(u, distance[chosen], EDGE_TOLERANCE * distance[chosen])
    best = np.where(np.isfinite(best), best, distance[chosen])  # rounding moved the grid point off its edge

    # 3. Turn each ray: a grid of directions within an angle around it (in the plane perpendicular to it),
    #    move to the direction whose first nominal point is nearest, halve the angle unless it sits on the rim.
    if d > 1:
        m = _DIRECTION_POINTS[d]
        offsets = np.stack(
            [g.ravel() for g in np.meshgrid(*[np.linspace(-1.0, 1.0, m)] * (d - 1), indexing="ij")], axis=1
        )
        on_rim = np.any(np.abs(offsets) == 1.0, axis=1)
        angle = np.full(u.shape[0], _FIRST_ANGLE)
        for _ in range(_MAX_TURNS):
            live = np.nonzero((angle > _LAST_ANGLE) & (best <= (1.0 + 2.0 * angle) * best.min()))[0]
            if live.size == 0:
                break
            turned = u[live, None, :] + angle[live, None, None] * np.einsum(
                "ma,kad->kmd", offsets, _tangent_basis(u[live])
            )
            turned /= np.linalg.norm(turned, axis=2, keepdims=True)
            k, mm = turned.shape[:2]
            reach = np.repeat(best[live], mm)
            tolerance = np.maximum(EDGE_TOLERANCE, 0.25 * np.repeat(angle[live], mm) ** 2) * reach
            hits = first_hits(turned.reshape(-1, d), reach, tolerance).reshape(k, mm)
            j = np.argmin(hits, axis=1)
            nearest = hits[np.arange(k), j]
            improved = nearest < best[live]
            u[live[improved]] = turned[improved, j[improved]]
            best[live[improved]] = nearest[improved]
            angle[live[~(improved & on_rim[j])]] *= 0.5
        # the last turns bisected coarsely: the first nominal point on the winning ray to EDGE_TOLERANCE
        winner = int(np.argmin(best))
        one = slice(winner, winner + 1)
        best[winner] = min(best[winner], first_hits(u[one], best[one] * (1.0 + 1e-9), EDGE_TOLERANCE * best[one])[0])
    winner = int(np.argmin(best))
    return result(best[winner] * u[winner])


# ---------------------------------------------------------------------------------------------- sensitivities


@dataclass(frozen=True)
class SensitivityRow:
    output: str
    field: str
    value: float  # d ln(output)/d ln(field); NaN where the model has no derivative there
    one_sided: bool  # the field sits at an edge of its valid range: a one-sided difference


def plan_sensitivities(
    base: Mapping[str, Any] | PlanBase, settings: Mapping[str, Any] | None = None
) -> tuple[SensitivityRow, ...]:
    """d ln q/d ln x of PLAN_SENSITIVITY_OUTPUTS for each positive numeric input the base sets, largest first."""
    b = plan_base(base)
    fields = positive_fields_set(b)
    s = log_sensitivities(b.columns, fields, PLAN_SENSITIVITY_OUTPUTS, settings, signed=())
    rows = [
        SensitivityRow(q, path, float(s.values[q][0, j]), bool(s.one_sided[0, j]))
        for q in PLAN_SENSITIVITY_OUTPUTS
        for j, path in enumerate(fields)
    ]
    return tuple(sorted(rows, key=lambda r: -abs(r.value) if math.isfinite(r.value) else math.inf))


__all__ = [
    "DROPPED_KEYS",
    "EDGE_TOLERANCE",
    "LINEAR_SPANS",
    "MAX_SCAN_POINTS",
    "PLAN_SENSITIVITY_OUTPUTS",
    "SCANNABLE_FIELDS",
    "Axis",
    "Nearest",
    "PlanBase",
    "PlanInputError",
    "Scan",
    "ScanAxis",
    "SensitivityRow",
    "Window",
    "Windows",
    "nearest_nominal",
    "nominal_windows",
    "plan_base",
    "plan_sensitivities",
    "positive_fields_set",
    "scan",
]
