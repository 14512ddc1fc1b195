"""Phase stability, defined once for the weekly summary and the campaign overview.

The figures are shot-to-shot: a campaign (and a week) holds deliberate density scans and
set-point changes, and the spread over all of them says nothing about the jitter at a
fixed set point. So each shot is compared with its neighbours in time: the
NEIGHBOUR_WINDOW_SHOTS - 1 shots around it (half before, half after; mirrored at the ends
of the series), never including the shot itself, which would pull the centre towards the
shot and make the spread about 8 % too low for a running median of 15.

- jitter of a logged condition x (density, population, sigma_z, sigma_r): robust spread
  (below) of ln x about the median of ln x over the neighbours, divided by
  sqrt(1 + v_m), v_m the variance of the median of m = NEIGHBOUR_WINDOW_SHOTS - 1 unit
  Gaussians (the neighbours' median has its own scatter), so Gaussian jitter of
  standard deviation s reads s;
- measured phase jitter [rad]: robust spread of each phase's deviation from the circular
  mean of its neighbours (angle of the mean of exp(i phase)), each deviation wrapped into
  (-pi, pi], divided by sqrt(1 + 1/m) for the same reason;
- expected jitter (MODEL.md section 5, issue of model version 2 item 7): the root-sum-square
  over the sources of |d psi / d ln x| x (jitter of ln x), psi = k_p xi_ref - N(z_ref)/sqrt(3),
  the derivatives from the model by central differences (model.wake_phase_derivatives, the
  function the planner's sensitivities use), their median over a sample of the shots.

The robust spread is the normalised median absolute deviation, 1.4826 x median(|d -
median(d)|), which equals the standard deviation for Gaussian jitter but ignores the few
shots right at a set-point step (a scan step shorter than half a window would otherwise
dominate a plain std). With fewer shots than the window, the neighbours are all the other
shots and the centre their mean (correction sqrt(n / (n - 1))). Inputs are aligned per-shot
arrays in time order of the shots with a measured phase (the dashboard and the weekly
summary select the same way), NaN where a value is absent; each figure uses the shots that
have its value.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from numpy.typing import ArrayLike

import model

# Shots in the centred running window (the shot and its neighbours). Neighbouring shots are
# almost always at the same set point, so deviations from the neighbours' median / circular
# mean are the shot-to-shot jitter; a deliberate scan or set-point step moves the window
# with it and drops out (except for the few shots right at a step).
NEIGHBOUR_WINDOW_SHOTS = 15
_HALF = NEIGHBOUR_WINDOW_SHOTS // 2
_NEIGHBOURS = NEIGHBOUR_WINDOW_SHOTS - 1

# Variance of the sample median of 14 unit Gaussians, (X_(7) + X_(8)) / 2: the double integral of the
# joint density of adjacent order statistics (David & Nagaraja, Order Statistics, 3rd ed. (2003),
# eq. 2.2.2), evaluated with scipy.integrate.dblquad (tests/summary/test_phase_jitter_budget.py redoes it).
MEDIAN_OF_NEIGHBOURS_VARIANCE = 0.10216783679607574

# The jitter sources of the expected phase jitter, in the order they are shown.
JITTER_SOURCES: tuple[str, ...] = model.PHASE_JITTER_SOURCES
DENSITY = "plasma.density_cm3"
JITTER_SOURCE_NAMES: dict[str, str] = {
    "plasma.density_cm3": "plasma density",
    "driver.population": "bunch population",
    "driver.sigma_z_mm": "bunch length \u03c3_z",
    "driver.sigma_r_mm": "bunch radius \u03c3_r",
}

# Shots whose phase derivatives are computed (evenly spread over the selection): the median
# of the derivatives is steady long before that, and 9 evaluations per shot stay cheap.
DERIVATIVE_SAMPLE_SHOTS = 200

# Normalised MAD: 1 / Phi^-1(3/4), so the spread of Gaussian jitter equals its std.
MAD_TO_SIGMA = 1.482602218505602


def _finite(values: ArrayLike) -> np.ndarray:
    v = np.asarray(values, dtype=float).ravel()
    return v[np.isfinite(v)]


def circular_mean_rad(phases: ArrayLike) -> float | None:
    """Direction of the mean unit vector exp(i phase); None without phases."""
    v = _finite(phases)
    return float(np.angle(np.mean(np.exp(1j * v)))) if v.size else None


def robust_spread(deviations: np.ndarray) -> float | None:
    """Normalised median absolute deviation of the finite deviations; None below two values."""
    d = deviations[np.isfinite(deviations)]
    if d.size < 2:
        return None
    return float(MAD_TO_SIGMA * np.median(np.abs(d - np.median(d))))


def _neighbours(v: np.ndarray) -> np.ndarray:
    """(..., n, NEIGHBOUR_WINDOW_SHOTS - 1): each value's neighbours in time along the last axis, itself
    left out, mirrored at the ends (each row of a 2-D array is a series of its own)."""
    padded = np.pad(v, [(0, 0)] * (v.ndim - 1) + [(_HALF, _HALF)], mode="reflect")
    window = sliding_window_view(padded, NEIGHBOUR_WINDOW_SHOTS, axis=-1)
    return np.delete(window, _HALF, axis=-1)


def _median_of_windows(windows: np.ndarray) -> np.ndarray:
    """np.median along the last axis of finite values, the same numbers: a sort of each short window
    (the mean of its two middle values for an even length) is about 4x quicker than np.median's
    partition at 20,000 windows of 14."""
    ordered = np.sort(windows, axis=-1)
    half = ordered.shape[-1] // 2
    if ordered.shape[-1] % 2:
        return ordered[..., half]
    return (ordered[..., half - 1] + ordered[..., half]) / 2


def log_jitter(values: ArrayLike) -> float | None:
    """Shot-to-shot jitter of ln x: robust spread of ln x about the median of its neighbours' ln x,
    corrected for the median's own scatter (module docstring); positive values in time order."""
    v = _finite(values)
    v = np.log(v[v > 0])
    n = v.size
    if n < 2:
        return None
    if n <= NEIGHBOUR_WINDOW_SHOTS:
        centre = (v.sum() - v) / (n - 1)  # the mean of the others
        correction = np.sqrt(n / (n - 1))
    else:
        centre = _median_of_windows(_neighbours(v))
        correction = np.sqrt(1.0 + MEDIAN_OF_NEIGHBOURS_VARIANCE)
    spread = robust_spread(v - centre)
    return None if spread is None else spread / correction


def phase_jitter_rad(phases: ArrayLike) -> float | None:
    """Shot-to-shot phase jitter: robust spread of each phase about the circular mean of its neighbours,
    deviations wrapped to (-pi, pi], corrected for the mean's own scatter (module docstring); time order."""
    v = _finite(phases)
    n = v.size
    if n < 2:
        return None
    unit = np.exp(1j * v)
    if n <= NEIGHBOUR_WINDOW_SHOTS:
        centre = (unit.sum() - unit) / (n - 1)
        correction = np.sqrt(n / (n - 1))
    else:
        centre = _neighbours(unit).mean(axis=1)
        correction = np.sqrt(1.0 + 1.0 / _NEIGHBOURS)
    spread = robust_spread(np.angle(unit * np.conj(centre)))
    return None if spread is None else spread / correction


def density_jitter_pct(density: ArrayLike) -> float | None:
    """Shot-to-shot density jitter in % (100 x log_jitter of the densities); time order."""
    jitter = log_jitter(density)
    return None if jitter is None else 100.0 * jitter


def derivative_sample(count: int) -> np.ndarray:
    """Indices of at most DERIVATIVE_SAMPLE_SHOTS shots spread evenly over ``count`` shots."""
    return np.unique(np.linspace(0, count - 1, min(count, DERIVATIVE_SAMPLE_SHOTS)).round().astype(int))


def typical_phase_derivatives(
    inputs: Mapping[str, ArrayLike], settings: Mapping[str, Any] | None
) -> dict[str, float | None]:
    """Median d psi/d ln x [rad] of each jitter source over an even sample of the shots (dotted-path model
    input columns of the selected shots; model.wake_phase_derivatives); None where no shot has one."""
    n = len(np.asarray(inputs[DENSITY]))
    if n == 0:
        return dict.fromkeys(JITTER_SOURCES)
    pick = derivative_sample(n)
    sample = {path: np.asarray(column)[pick] for path, column in inputs.items()}
    derivatives = model.wake_phase_derivatives(sample, settings)
    typical: dict[str, float | None] = {}
    for path in JITTER_SOURCES:
        d = _finite(derivatives[path])
        typical[path] = float(np.median(d)) if d.size else None
    return typical


def _robust_spreads(deviations: np.ndarray) -> np.ndarray:
    """robust_spread of each row (every value finite)."""
    centre = np.median(deviations, axis=-1, keepdims=True)
    return MAD_TO_SIGMA * np.median(np.abs(deviations - centre), axis=-1)


def _log_jitters(rows: np.ndarray) -> np.ndarray:
    """log_jitter of each row of positive values longer than the window, all at once."""
    v = np.log(rows)
    centre = _median_of_windows(_neighbours(v))
    return _robust_spreads(v - centre) / np.sqrt(1.0 + MEDIAN_OF_NEIGHBOURS_VARIANCE)


def _phase_jitters(rows: np.ndarray) -> np.ndarray:
    """phase_jitter_rad of each row of finite phases longer than the window, all at once."""
    unit = np.exp(1j * rows)
    centre = _neighbours(unit).mean(axis=-1)
    return _robust_spreads(np.angle(unit * np.conj(centre))) / np.sqrt(1.0 + 1.0 / _NEIGHBOURS)


@dataclass(frozen=True)
class PhaseJitter:
    phase_count: int
    measured_phase_std_rad: float | None  # shot-to-shot, about the neighbours' circular mean
    density_count: int
    density_spread_pct: float | None  # shot-to-shot, about the neighbours' median
    phase_per_pct_density_rad: float | None  # |d psi/d ln n| / 100: the wake phase change per 1 % density
    expected_phase_jitter_rad: float | None  # root-sum-square of expected_by_source_rad
    spread_pct: dict[str, float | None] = field(default_factory=dict)  # source -> shot-to-shot jitter [%]
    phase_per_ln_rad: dict[str, float | None] = field(default_factory=dict)  # source -> d psi/d ln x [rad]
    expected_by_source_rad: dict[str, float | None] = field(default_factory=dict)  # source -> its part [rad]


def phase_jitter(
    phases: ArrayLike, sources: Mapping[str, ArrayLike], derivatives: Mapping[str, float | None]
) -> PhaseJitter:
    """Measured shot-to-shot phase jitter beside the jitter that the logged jitters of the sources predict.

    ``phases`` and each of ``sources`` (path -> values) are aligned arrays in time order (NaN ignored);
    ``derivatives`` are the typical d psi/d ln x (typical_phase_derivatives). A source whose jitter or
    derivative is unknown is left out of the total (its part reads None); a constant one adds zero."""
    spreads = {path: log_jitter(values) for path, values in sources.items()}
    return _budget(
        int(_finite(phases).size),
        phase_jitter_rad(phases),
        int(_finite(sources[DENSITY]).size) if DENSITY in sources else 0,
        spreads,
        derivatives,
    )


def phase_jitter_by_part(
    phases: ArrayLike,
    sources: Mapping[str, ArrayLike],
    derivatives: Mapping[str, float | None],
    parts: list[tuple[int, int]],
) -> list[PhaseJitter]:
    """phase_jitter of each part [lo, hi) of the aligned arrays (the overview's groups of consecutive
    shots). The same numbers, but parts of one length are computed together, one numpy call for all
    of them, when every value is finite (and every source positive) and every part is longer than
    the window; otherwise part by part."""
    phase = np.asarray(phases, dtype=float)
    logged = {path: np.asarray(values, dtype=float) for path, values in sources.items()}
    regular = (
        all(hi - lo > NEIGHBOUR_WINDOW_SHOTS for lo, hi in parts)
        and bool(np.isfinite(phase).all())
        and all(bool(np.isfinite(v).all() and (v > 0).all()) for v in logged.values())
    )
    if not regular:
        return [phase_jitter(phase[lo:hi], {p: v[lo:hi] for p, v in logged.items()}, derivatives) for lo, hi in parts]
    by_length: dict[int, list[int]] = {}
    for i, (lo, hi) in enumerate(parts):
        by_length.setdefault(hi - lo, []).append(i)

    def per_part(values: np.ndarray, spreads_of: Any) -> np.ndarray:
        out = np.empty(len(parts))
        for length, members in by_length.items():
            block = np.stack([values[parts[i][0] : parts[i][0] + length] for i in members])
            out[members] = spreads_of(block)
        return out

    phase_std = per_part(phase, _phase_jitters)
    source_spreads = {path: per_part(v, _log_jitters) for path, v in logged.items()}
    return [
        _budget(
            hi - lo,
            float(phase_std[i]),
            hi - lo if DENSITY in logged else 0,
            {path: float(values[i]) for path, values in source_spreads.items()},
            derivatives,
        )
        for i, (lo, hi) in enumerate(parts)
    ]


def _budget(
    phase_count: int,
    phase_std: float | None,
    density_count: int,
    spreads: Mapping[str, float | None],
    derivatives: Mapping[str, float | None],
) -> PhaseJitter:
    """The expected jitter from the sources' shot-to-shot jitters (of ln x) and phase derivatives."""
    parts: dict[str, float | None] = {}
    for path, spread in spreads.items():
        slope = derivatives.get(path)
        if spread is None or slope is None:
            parts[path] = None
        else:
            part = model.phase_jitter_budget({path: slope}, {path: spread}).by_source_rad[path]
            parts[path] = float(part)
    known = [p for p in parts.values() if p is not None]
    expected = float(np.sqrt(sum(p * p for p in known))) if known else None
    density_slope = derivatives.get(DENSITY)
    density_spread = spreads.get(DENSITY)
    return PhaseJitter(
        phase_count=phase_count,
        measured_phase_std_rad=phase_std,
        density_count=density_count,
        density_spread_pct=None if density_spread is None else 100.0 * density_spread,
        phase_per_pct_density_rad=None if density_slope is None else abs(density_slope) / 100.0,
        expected_phase_jitter_rad=expected,
        spread_pct={path: None if s is None else 100.0 * s for path, s in spreads.items()},
        phase_per_ln_rad={path: derivatives.get(path) for path in spreads},
        expected_by_source_rad=parts,
    )
