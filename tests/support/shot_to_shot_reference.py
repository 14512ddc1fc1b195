"""Independent reference for the shot-to-shot phase-stability figures, written out shot by
shot with plain Python (statistics, cmath) instead of the numpy windows the app uses.

Definition (MODEL.md section 5 applied at a fixed set point): each shot is compared with its
14 neighbours in time (7 before, 7 after, mirrored at the ends of the series), never with
itself; with at most 15 shots the neighbours are all the other shots and the centre their
plain mean. A logged condition's jitter is the spread of ln x about the neighbours' median
of ln x, divided by sqrt(1 + v_14) (v_14: variance of the median of 14 unit Gaussians); the
phase jitter is the spread of the wrapped deviation from the neighbours' circular mean,
divided by sqrt(1 + 1/14); with fewer shots both divide by sqrt(n / (n - 1)). The spread is
the normalised median absolute deviation, 1.4826 x median(|d - median(d)|) (equal to the std
for Gaussian jitter; Rousseeuw & Croux, J. Am. Stat. Assoc. 88, 1273 (1993)).
"""

from __future__ import annotations

import cmath
import math
import statistics
from collections.abc import Sequence

WINDOW = 15
MEDIAN_OF_14_VARIANCE = (
    0.10216783679607574  # recomputed by dblquad in tests/summary/test_shot_to_shot_phase_stability.py
)


def _neighbours(values: Sequence[float], i: int) -> list[float]:
    n, half = len(values), WINDOW // 2

    def mirrored(j: int) -> int:
        return -j if j < 0 else (2 * (n - 1) - j if j > n - 1 else j)

    return [values[mirrored(j)] for j in range(i - half, i + half + 1) if j != i]


def _normalised_mad(deviations: Sequence[float]) -> float:
    d = list(deviations)
    centre = statistics.median(d)
    return 1.482602218505602 * statistics.median(abs(x - centre) for x in d)


def _circular_mean(phases: Sequence[float]) -> float:
    return cmath.phase(sum(cmath.exp(1j * p) for p in phases))


def log_jitter(values: Sequence[float]) -> float | None:
    """Jitter of ln x about the neighbours' median (module docstring)."""
    logs = [math.log(v) for v in values]
    n = len(logs)
    if n < 2:
        return None
    if n <= WINDOW:
        centres = [(sum(logs) - x) / (n - 1) for x in logs]
        correction = math.sqrt(n / (n - 1))
    else:
        centres = [statistics.median(_neighbours(logs, i)) for i in range(n)]
        correction = math.sqrt(1 + MEDIAN_OF_14_VARIANCE)
    return _normalised_mad([x - c for x, c in zip(logs, centres, strict=True)]) / correction


def density_jitter_pct(densities: Sequence[float]) -> float | None:
    jitter = log_jitter(densities)
    return None if jitter is None else 100 * jitter


def phase_jitter_rad(phases: Sequence[float]) -> float | None:
    """Wrapped deviation of each phase from its neighbours' circular mean (module docstring)."""
    n = len(phases)
    if n < 2:
        return None
    if n <= WINDOW:
        centres = [_circular_mean([q for j, q in enumerate(phases) if j != i]) for i in range(n)]
        correction = math.sqrt(n / (n - 1))
    else:
        centres = [_circular_mean(_neighbours(phases, i)) for i in range(n)]
        correction = math.sqrt(1 + 1 / (WINDOW - 1))
    deviations = [cmath.phase(cmath.exp(1j * (p - c))) for p, c in zip(phases, centres, strict=True)]
    return _normalised_mad(deviations) / correction
