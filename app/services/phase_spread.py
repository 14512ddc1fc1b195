"""Phase stability, defined once for the weekly summary and the campaign overview.

The figures are shot-to-shot: a campaign (and a week) holds deliberate density scans and
set-point changes, and the spread over all of them says nothing about the jitter at a
fixed set point. So each shot is compared with its neighbours in time, a centred window
of NEIGHBOUR_WINDOW_SHOTS shots (the window is clipped at the ends by repeating the
first / last shot, scipy's mode="nearest"):

- density jitter [%]: robust spread (below) of each density's deviation from the running
  median of its window, relative to that median, in %;
- measured phase jitter [rad]: robust spread of each phase's deviation from the running
  circular mean of its window (angle of the mean of exp(i phase)), each deviation wrapped
  into (-pi, pi] so phases either side of +-pi are not counted as 2 pi apart;
- expected jitter (MODEL.md section 5): median(phase_per_pct_density_rad) x density jitter.

The robust spread is the normalised median absolute deviation, 1.4826 x median(|d -
median(d)|), which equals the standard deviation for Gaussian jitter but ignores the few
shots right at a set-point step (a scan step shorter than half a window would otherwise
dominate a plain std). With fewer shots than the window the window is all of them: the
whole-set spread about the mean density / the circular mean. Inputs are aligned per-shot arrays in time order, NaN
where a value is absent; each figure uses the shots that have its value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.ndimage import median_filter, uniform_filter1d

# Shots in the centred running window. Neighbouring shots are almost always at the same
# set point, so deviations from the window's median / circular mean are the shot-to-shot
# jitter; a deliberate scan or set-point step moves the window with it and drops out
# (except for the few shots right at a step). 15 is wide enough for a steady median.
NEIGHBOUR_WINDOW_SHOTS = 15


def _finite(values: ArrayLike) -> np.ndarray:
    v = np.asarray(values, dtype=float).ravel()
    return v[np.isfinite(v)]


def circular_mean_rad(phases: ArrayLike) -> float | None:
    """Direction of the mean unit vector exp(i phase); None without phases."""
    v = _finite(phases)
    return float(np.angle(np.mean(np.exp(1j * v)))) if v.size else None


# Normalised MAD: 1 / Phi^-1(3/4), so the spread of Gaussian jitter equals its std.
MAD_TO_SIGMA = 1.482602218505602


def robust_spread(deviations: np.ndarray) -> float | None:
    """Normalised median absolute deviation of the finite deviations; None below two values."""
    d = deviations[np.isfinite(deviations)]
    if d.size < 2:
        return None
    return float(MAD_TO_SIGMA * np.median(np.abs(d - np.median(d))))


def phase_jitter_rad(phases: ArrayLike) -> float | None:
    """Shot-to-shot phase jitter: robust spread of each phase about the running circular mean
    of its NEIGHBOUR_WINDOW_SHOTS neighbours, deviations wrapped to (-pi, pi]; time order."""
    v = _finite(phases)
    if v.size < 2:
        return None
    unit = np.exp(1j * v)
    if v.size < NEIGHBOUR_WINDOW_SHOTS:
        centre = np.full(v.size, np.mean(unit))
    else:
        centre = uniform_filter1d(unit.real, NEIGHBOUR_WINDOW_SHOTS, mode="nearest") + 1j * uniform_filter1d(
            unit.imag, NEIGHBOUR_WINDOW_SHOTS, mode="nearest"
        )
    return robust_spread(np.angle(unit * np.conj(centre)))


def density_jitter_pct(density: ArrayLike) -> float | None:
    """Shot-to-shot density jitter: robust spread of each density's deviation from the running
    median of its NEIGHBOUR_WINDOW_SHOTS neighbours, in % of that median; time order."""
    v = _finite(density)
    if v.size < 2:
        return None
    if v.size < NEIGHBOUR_WINDOW_SHOTS:
        centre = np.full(v.size, np.mean(v))
    else:
        centre = median_filter(v, size=NEIGHBOUR_WINDOW_SHOTS, mode="nearest")
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = 100.0 * (v - centre) / centre
    return robust_spread(relative)


@dataclass(frozen=True)
class PhaseJitter:
    phase_count: int
    measured_phase_std_rad: float | None  # shot-to-shot, about the running circular mean
    density_count: int
    density_spread_pct: float | None  # shot-to-shot, about the running median
    phase_per_pct_density_rad: float | None  # median over the shots
    expected_phase_jitter_rad: float | None


def phase_jitter(phases: ArrayLike, density: ArrayLike, phase_per_pct_density_rad: ArrayLike) -> PhaseJitter:
    """Measured shot-to-shot phase jitter beside the jitter the shot-to-shot density jitter
    predicts; aligned arrays in time order, NaN values ignored."""
    phase, dens, per_pct = _finite(phases), _finite(density), _finite(phase_per_pct_density_rad)
    spread = density_jitter_pct(dens)
    median = float(np.median(per_pct)) if per_pct.size else None
    expected = median * spread if median is not None and spread is not None else None
    return PhaseJitter(
        phase_count=int(phase.size),
        measured_phase_std_rad=phase_jitter_rad(phase),
        density_count=int(dens.size),
        density_spread_pct=spread,
        phase_per_pct_density_rad=median,
        expected_phase_jitter_rad=expected,
    )
