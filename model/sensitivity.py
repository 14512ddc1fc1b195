"""Sensitivities of the shot model by central differences, and the expected shot-to-shot phase jitter.

One difference scheme serves the planner's sensitivity table and the phase-jitter budget
(MODEL.md section 5): log_sensitivities perturbs each chosen input x of each shot to
x (1 +- h) (h = 1e-3 by default) and evaluates every perturbed row, with the unperturbed
shots, in ONE evaluate_table call.

- d ln q / d ln x for outputs that are positive by definition (lengths, frequencies,
  e-folds N >= 0, the wakefield, tolerances: their logarithmic derivative is the
  exponent of a local power law, the figure a physicist compares with q ~ x^p);
- dq / d ln x for the outputs in SIGNED_OUTPUTS, which change sign across ordinary
  conditions (e-fold margins and ratios taken as logarithms, the gradient phase error,
  the frequency mismatch): the logarithm of such a quantity is undefined at and beyond
  its zero, while dq / d ln x (change of q per relative change of x) stays meaningful.

Where no derivative exists the value is NaN, never a guess:
- the output is null (NaN) at the shot or at a perturbed point (e.g. saturation_length_m
  on the side where the modulation no longer saturates), or, for a logarithmic
  derivative, not > 0 there (hosing_ratio of a centred beam is 0);
- the two one-sided differences disagree, i.e. the perturbation crosses a regime
  boundary of the model (the saturation point moving z_ref from z_sat to L, the noise
  floor, a min/max switch, the series-to-asymptote switch): the model is not
  differentiable there. Test: |fwd - bwd| > 0.1 max(|fwd|, |bwd|) + 0.01 S, with S = 1
  for a logarithmic derivative and S = max |q| over the three points for dq/d ln x.
  A smooth output has |fwd - bwd| ~ h |d2q/d(ln x)2| (1e-3 times its curvature), far
  below that; a kink gives the full change of slope whatever the step;
- the input is absent, not > 0 (a log step needs x > 0), or an integer field (a
  fractional step is not a valid value).
At the edge of the valid range (x (1 + h) or x (1 - h) refused by the model's own
validation, including the ranges that depend on other fields such as |zeta_s| <= 10
sigma_z), the one-sided difference from the valid side is used (accuracy O(h) instead
of O(h^2)) and `one_sided` says so.

The phase-jitter budget: psi = k_p xi_ref - N(z_ref)/sqrt(3) is the phase of the wake at
the reference slice (MODEL.md section 5). wake_phase_derivatives returns d psi / d ln x
per shot for the jitter sources (density, population, sigma_z, sigma_r), from the outputs
(k_p xi_ref = 200 phase_per_pct_density_rad, N(z_ref)/sqrt(3) = phase_slip_rad), and
phase_jitter_budget combines them with the shot-to-shot spreads of ln x into the
expected jitter sqrt(sum_x (d psi / d ln x * spread_x)^2), by source. For a campaign
figure (phase-stability card, weekly summary), for instance:

    derivatives = wake_phase_derivatives(columns_of_the_shots, settings)     # path -> (shots,)
    typical = {path: np.nanmedian(d) for path, d in derivatives.items()}      # or per shot
    spreads = {"plasma.density_cm3": density_jitter_pct / 100, ...}           # spread of ln x
    budget = phase_jitter_budget(typical, spreads)   # .expected_rad, .by_source_rad[path]

Cost: one evaluate_table call on shots x (2 fields + 1) rows, 9 rows per shot for the four
jitter sources: about 0.1 s for 10,000 shots, 2 s and 0.7 GB peak for 100,000 on the 2-core
machine (tests/bench/bench_plan.py). A campaign figure needs typical derivatives, not every
shot's: pass the shots the figure is about, or a sample of them.
"""

from __future__ import annotations

import math
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from model.evaluate import evaluate_table
from model.inputs import FIELDS_BY_PATH, ShotInputError, refused_rows, validate_columns
from model.rules import FLAG_CODES
from model.vocabulary import OUTPUT_NAMES, OUTPUTS_BY_NAME

RELATIVE_STEP = 1e-3  # the +-0.1 % of the central differences
# Outputs that change sign in ordinary conditions: differentiated as dq/d ln x (see the module docstring).
SIGNED_OUTPUTS: frozenset[str] = frozenset(
    {"seed_to_noise_efolds", "growth_margin_efolds", "gradient_phase_error_rad", "frequency_mismatch_pct"}
)
_KINK_RELATIVE = 0.1
_KINK_FLOOR = 1e-2
INVALID_STATUS = -1  # status rank of a row the model refuses (evaluate_where_valid)


def _row_count(columns: Mapping[str, np.ndarray]) -> int:
    lengths = {v.shape[0] for v in columns.values() if v.ndim == 1}
    return lengths.pop() if len(lengths) == 1 else 1


def _rows(columns: Mapping[str, np.ndarray], rows: slice | np.ndarray) -> dict[str, np.ndarray]:
    return {path: (v[rows] if v.ndim == 1 else v) for path, v in columns.items()}


def evaluate_where_valid(
    columns: Mapping[str, Any], settings: Mapping[str, Any] | None = None
) -> tuple[np.ndarray, Mapping[str, np.ndarray]]:
    """evaluate_table on the rows the model accepts: (valid mask, table); a refused row has NaN outputs,
    status INVALID_STATUS and flag ranks 0 (MODEL.md sections 1-7).

    One evaluate_table call when every row is valid; otherwise the model's row-by-row check (the one
    behind validate_columns) marks the refused rows and the others are evaluated in one more call.
    """
    cols = {path: np.asarray(v) for path, v in columns.items()}
    n = _row_count(cols)
    try:
        return np.ones(n, dtype=bool), evaluate_table(cols, settings)
    except ShotInputError:
        valid = ~refused_rows(cols)
        if valid.all():  # a refusal of the table as a whole (column lengths), not of rows
            raise
    table: dict[str, np.ndarray] = {}
    if valid.any():
        for key, values in evaluate_table(_rows(cols, valid), settings).items():
            full = np.full(n, INVALID_STATUS if key == "status" else 0, dtype=values.dtype)
            if values.dtype.kind == "f":
                full[:] = np.nan
            full[valid] = values
            table[key] = full
        return valid, table
    table = {name: np.full(n, np.nan) for name in OUTPUT_NAMES}
    table["status"] = np.full(n, INVALID_STATUS, dtype=np.int8)
    for code in FLAG_CODES:
        table["flag." + code] = np.zeros(n, dtype=np.int8)
        table["flag_value." + code] = np.full(n, np.nan)
        table["flag_limit." + code] = np.full(n, np.nan)
    return valid, table


@dataclass(frozen=True)
class Sensitivities:
    """Derivatives of outputs with respect to the logarithm of inputs, for many shots."""

    fields: tuple[str, ...]  # input paths, the columns of each array
    outputs: tuple[str, ...]
    logarithmic: dict[str, bool]  # True: d ln q / d ln x; False: dq / d ln x (SIGNED_OUTPUTS)
    values: dict[str, np.ndarray]  # output -> (shots, fields) float array, NaN where no derivative exists
    one_sided: np.ndarray  # (shots, fields) bool: a range edge forced a one-sided difference


def log_sensitivities(
    columns: Mapping[str, Any],
    fields: Sequence[str],
    outputs: Sequence[str],
    settings: Mapping[str, Any] | None = None,
    *,
    relative_step: float = RELATIVE_STEP,
    signed: Collection[str] = SIGNED_OUTPUTS,
) -> Sensitivities:
    """d ln q/d ln x (dq/d ln x for outputs in `signed`) by central differences at x (1 +- h) for every shot of
    `columns` and every input path of `fields`, all points in one evaluate_table call (see the module docstring)."""
    unknown_fields = [p for p in fields if p not in FIELDS_BY_PATH or FIELDS_BY_PATH[p].kind == "enum"]
    unknown_outputs = [q for q in outputs if q not in OUTPUTS_BY_NAME]
    if unknown_fields or unknown_outputs:
        raise ValueError(f"not numeric inputs: {unknown_fields}; not outputs: {unknown_outputs}")
    if not 0.0 < relative_step < 0.1:
        raise ValueError(f"relative_step must lie in (0, 0.1), got {relative_step!r}")
    clean = validate_columns(columns)
    n = clean["driver.species"].shape[0]
    n_fields = len(fields)
    blocks = 2 * n_fields + 1  # block 0: the shots; block 1 + 2j: field j up; block 2 + 2j: field j down
    table_columns = {path: np.tile(values, blocks) for path, values in clean.items()}
    steppable = np.zeros((n, n_fields), dtype=bool)
    for j, path in enumerate(fields):
        x = clean[path]
        with np.errstate(invalid="ignore"):
            steppable[:, j] = (x > 0.0) & (FIELDS_BY_PATH[path].kind != "integer")
        table_columns[path][(1 + 2 * j) * n : (2 + 2 * j) * n] = x * (1.0 + relative_step)
        table_columns[path][(2 + 2 * j) * n : (3 + 2 * j) * n] = x * (1.0 - relative_step)
    valid, table = evaluate_where_valid(table_columns, settings)
    valid = valid.reshape(blocks, n)
    up_valid, down_valid = valid[1::2].T, valid[2::2].T  # (shots, fields)
    one_sided = steppable & (up_valid != down_valid)

    step_up, step_down = math.log1p(relative_step), -math.log1p(-relative_step)  # both > 0
    values: dict[str, np.ndarray] = {}
    logarithmic = {q: q not in signed for q in outputs}
    with np.errstate(divide="ignore", invalid="ignore"):
        for q in outputs:
            raw = table[q].reshape(blocks, n)
            g = np.where(raw > 0.0, np.log(raw), np.nan) if logarithmic[q] else raw
            g0 = g[0][:, None]
            g_up, g_down = g[1::2].T, g[2::2].T
            forward = (g_up - g0) / step_up
            backward = (g0 - g_down) / step_down
            central = (g_up - g_down) / (step_up + step_down)
            if logarithmic[q]:
                scale: Any = 1.0
            else:
                scale = np.maximum(np.abs(raw[0])[:, None], np.maximum(np.abs(raw[1::2].T), np.abs(raw[2::2].T)))
            kink = np.abs(forward - backward) > _KINK_RELATIVE * np.maximum(np.abs(forward), np.abs(backward)) + (
                _KINK_FLOOR * scale
            )
            both = np.where(kink, np.nan, central)  # NaN anywhere in the three points propagates
            derivative = np.where(up_valid & down_valid, both, np.where(up_valid, forward, backward))
            derivative = np.where(steppable & (up_valid | down_valid), derivative, np.nan)
            values[q] = np.where(np.isfinite(derivative), derivative, np.nan)
    return Sensitivities(tuple(fields), tuple(outputs), logarithmic, values, one_sided)


# The logged inputs whose shot-to-shot jitter moves the wake phase (issue: density, population, sigma_z, sigma_r).
PHASE_JITTER_SOURCES: tuple[str, ...] = (
    "plasma.density_cm3",
    "driver.population",
    "driver.sigma_z_mm",
    "driver.sigma_r_mm",
)


def wake_phase_derivatives(
    columns: Mapping[str, Any],
    settings: Mapping[str, Any] | None = None,
    sources: Sequence[str] = PHASE_JITTER_SOURCES,
    *,
    relative_step: float = RELATIVE_STEP,
) -> dict[str, np.ndarray]:
    """d psi/d ln x [rad] per shot for each source x, psi = k_p xi_ref - N(z_ref)/sqrt(3) the wake phase at the
    reference slice (MODEL.md section 5; Schroeder et al., PRL 107, 145002 (2011)); NaN as in log_sensitivities."""
    parts = ("phase_per_pct_density_rad", "phase_slip_rad")
    s = log_sensitivities(columns, sources, parts, settings, relative_step=relative_step, signed=parts)
    per_pct, slip = s.values["phase_per_pct_density_rad"], s.values["phase_slip_rad"]
    return {path: 200.0 * per_pct[:, j] - slip[:, j] for j, path in enumerate(sources)}  # k_p xi = 200 x rad/%


@dataclass(frozen=True)
class PhaseJitterBudget:
    """Expected shot-to-shot phase jitter and its parts (arrays broadcast from the inputs; 0-d for scalars)."""

    by_source_rad: dict[str, np.ndarray]  # |d psi/d ln x| x spread of ln x, per source
    expected_rad: np.ndarray  # root-sum-square of the parts


def phase_jitter_budget(
    derivatives: Mapping[str, ArrayLike], spreads: Mapping[str, ArrayLike | float | None]
) -> PhaseJitterBudget:
    """Expected phase jitter sqrt(sum_x (d psi/d ln x * spread of ln x)^2) over the sources in `spreads`
    (linear error propagation of independent jitters; psi of MODEL.md section 5).

    `derivatives`: source path -> d psi/d ln x [rad] (wake_phase_derivatives; per shot or one number).
    `spreads`: source path -> shot-to-shot spread of ln x (a relative jitter: 0.002 for 0.2 %). A source
    with zero spread contributes exactly zero (whatever its derivative); an unknown spread (None or NaN),
    or a NaN derivative with a non-zero spread, makes that part and the total NaN.
    """
    missing = [path for path in spreads if path not in derivatives]
    if missing:
        raise ValueError(f"no phase derivative for the jitter source(s) {missing}")
    parts: dict[str, np.ndarray] = {}
    for path, spread in spreads.items():
        width = np.asarray(np.nan if spread is None else spread, dtype=float)
        if np.any(width < 0):
            raise ValueError(f"the spread of {path} must be >= 0")
        with np.errstate(invalid="ignore"):
            parts[path] = np.where(width == 0.0, 0.0, np.abs(np.asarray(derivatives[path], dtype=float)) * width)
    if not parts:
        return PhaseJitterBudget({}, np.asarray(0.0))
    total = np.sqrt(sum(part * part for part in parts.values()))
    return PhaseJitterBudget(parts, np.asarray(total))


__all__ = [
    "INVALID_STATUS",
    "PHASE_JITTER_SOURCES",
    "RELATIVE_STEP",
    "SIGNED_OUTPUTS",
    "PhaseJitterBudget",
    "Sensitivities",
    "evaluate_where_valid",
    "log_sensitivities",
    "phase_jitter_budget",
    "wake_phase_derivatives",
]
