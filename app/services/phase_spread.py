"""Phase stability, defined once for the weekly summary and the campaign overview.

Measured spread: the sample standard deviation of the phases about their circular mean,
each deviation wrapped into (-pi, pi], so phases either side of +-pi are not counted as
2 pi apart (away from the wrap it equals the plain sample std). Expected jitter
(MODEL.md section 5): median(phase_per_pct_density_rad) x 100 std(density) / mean(density).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike


def _finite(values: ArrayLike) -> np.ndarray:
    v = np.asarray(values, dtype=float).ravel()
    return v[np.isfinite(v)]


def circular_mean_rad(phases: ArrayLike) -> float | None:
    """Direction of the mean unit vector exp(i phase); None without phases."""
    v = _finite(phases)
    return float(np.angle(np.mean(np.exp(1j * v)))) if v.size else None


def phase_spread_rad(phases: ArrayLike) -> float | None:
    """Sample std (n - 1) of the phases about their circular mean, deviations wrapped to (-pi, pi]."""
    v = _finite(phases)
    if v.size < 2:
        return None
    deviation = np.angle(np.exp(1j * (v - np.angle(np.mean(np.exp(1j * v))))))
    return float(np.std(deviation, ddof=1))


def density_spread_pct(density: ArrayLike) -> float | None:
    """Sample std of the density in % of its mean; None below two values."""
    v = _finite(density)
    if v.size < 2:
        return None
    mean = float(np.mean(v))
    return float(100.0 * np.std(v, ddof=1) / mean) if mean else None


@dataclass(frozen=True)
class PhaseJitter:
    phase_count: int
    measured_phase_std_rad: float | None
    density_count: int
    density_spread_pct: float | None
    phase_per_pct_density_rad: float | None  # median over the shots
    expected_phase_jitter_rad: float | None


def phase_jitter(phases: ArrayLike, density: ArrayLike, phase_per_pct_density_rad: ArrayLike) -> PhaseJitter:
    """Measured phase spread beside the jitter the density spread predicts (NaN values ignored)."""
    phase, dens, per_pct = _finite(phases), _finite(density), _finite(phase_per_pct_density_rad)
    spread = density_spread_pct(dens)
    median = float(np.median(per_pct)) if per_pct.size else None
    expected = median * spread if median is not None and spread is not None else None
    return PhaseJitter(
        phase_count=int(phase.size),
        measured_phase_std_rad=phase_spread_rad(phase),
        density_count=int(dens.size),
        density_spread_pct=spread,
        phase_per_pct_density_rad=median,
        expected_phase_jitter_rad=expected,
    )
