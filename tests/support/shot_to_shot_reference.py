"""Independent reference for the shot-to-shot phase-stability figures, written out shot by
shot with plain Python (statistics, cmath) instead of the scipy filters the app uses.

Definition (MODEL.md section 5 applied at a fixed set point): each shot is compared with a
centred window of 15 shots in time order, the window clipped at the ends by repeating the
first / last shot; with fewer than 15 shots the window is all of them and the centre is the
plain mean density / the circular mean phase. The spread of the deviations is the normalised
median absolute deviation, 1.4826 x median(|d - median(d)|) (equal to the std for Gaussian
jitter; Rousseeuw & Croux, J. Am. Stat. Assoc. 88, 1273 (1993)).
"""

from __future__ import annotations

import cmath
import statistics
from collections.abc import Sequence

WINDOW = 15


def _window(values: Sequence[float], i: int) -> list[float]:
    n, half = len(values), WINDOW // 2
    return [values[min(max(j, 0), n - 1)] for j in range(i - half, i + half + 1)]


def _normalised_mad(deviations: Sequence[float]) -> float:
    d = list(deviations)
    centre = statistics.median(d)
    return 1.482602218505602 * statistics.median(abs(x - centre) for x in d)


def _circular_mean(phases: Sequence[float]) -> float:
    return cmath.phase(sum(cmath.exp(1j * p) for p in phases))


def density_jitter_pct(densities: Sequence[float]) -> float | None:
    """Normalised MAD of each density's deviation from its window's median, in % of that median."""
    n = len(densities)
    if n < 2:
        return None
    if n < WINDOW:
        centres = [statistics.fmean(densities)] * n
    else:
        centres = [statistics.median(_window(densities, i)) for i in range(n)]
    return _normalised_mad(100 * (d - c) / c for d, c in zip(densities, centres, strict=False))


def phase_jitter_rad(phases: Sequence[float]) -> float | None:
    """Normalised MAD of each phase's deviation from its window's circular mean, wrapped to (-pi, pi]."""
    n = len(phases)
    if n < 2:
        return None
    if n < WINDOW:
        centres = [_circular_mean(phases)] * n
    else:
        centres = [_circular_mean(_window(phases, i)) for i in range(n)]
    return _normalised_mad(cmath.phase(cmath.exp(1j * (p - c))) for p, c in zip(phases, centres, strict=False))
