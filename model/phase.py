"""Phase of the growing self-modulation and its sensitivity to the plasma density (MODEL.md section 5; SI in).

The growing mode's phase at xi behind the seed is k_p xi - N/sqrt(3): it slips backwards
while it grows, so the wake is slower than the beam (Kumar, Pukhov, Lotov, PRL 104, 255003
(2010); Schroeder et al., PRL 107, 145002 (2011); Pukhov et al., PRL 107, 145003 (2011)).
Every function works elementwise on arrays of shots as well as on one. The two quantities
that MODEL.md defines per percent of density are returned in percent (suffix _pct).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

_SQRT3 = math.sqrt(3.0)


def phase_slip(efolds: ArrayLike) -> np.ndarray:
    """Backward phase slip of the growing mode N/sqrt(3) [rad] (MODEL.md section 5; Schroeder 2011, Pukhov 2011)."""
    return np.asarray(efolds, dtype=float) / _SQRT3


def phase_velocity_deficit(efolds: ArrayLike, kp: ArrayLike, z: ArrayLike) -> np.ndarray:
    """(c - v_ph)/c = 2N/(3 sqrt(3) k_p z) of the wake at z (MODEL.md section 5; Schroeder 2011, Pukhov 2011)."""
    return 2.0 * phase_slip(efolds) / (3.0 * np.asarray(kp, dtype=float) * np.asarray(z, dtype=float))


def phase_per_pct_density(kp: ArrayLike, xi: ArrayLike) -> np.ndarray:
    """k_p xi / 200 [rad per %]: phase change at xi for a 1 % density change, k_p ~ sqrt(n) (MODEL.md 5, heuristic)."""
    return np.asarray(kp, dtype=float) * xi / 200.0


def density_tolerance_pct(kp: ArrayLike, xi: ArrayLike, phase_tolerance: ArrayLike) -> np.ndarray:
    """100 * 2 dpsi_tol/(k_p xi) [%]: the density change moving the phase at xi by dpsi_tol (MODEL.md 5, heuristic)."""
    return 200.0 * np.asarray(phase_tolerance, dtype=float) / (np.asarray(kp, dtype=float) * xi)


def compensating_gradient_pct_per_m(efolds: ArrayLike, kp: ArrayLike, xi: ArrayLike, z: ArrayLike) -> np.ndarray:
    """100 * 4N/(3 sqrt(3) k_p xi z) [%/m]: k_p xi g/2 = d(N/sqrt(3))/dz cancels the slip rate (MODEL.md 5)."""
    return 400.0 * phase_slip(efolds) / (3.0 * (np.asarray(kp, dtype=float) * xi) * np.asarray(z, dtype=float))


def gradient_phase_error(
    kp: ArrayLike, xi: ArrayLike, gradient: ArrayLike, length: ArrayLike, efolds: ArrayLike
) -> np.ndarray:
    """k_p xi (sqrt(1 + g L) - 1) - N/sqrt(3) [rad]: phase error of a gradient g [1/m] over L (MODEL.md 5)."""
    gl = np.asarray(gradient, dtype=float) * length
    # sqrt(1 + gL) - 1 = gL / (sqrt(1 + gL) + 1), without the cancellation for a small gradient
    return np.asarray(kp, dtype=float) * xi * (gl / (np.sqrt(1.0 + gl) + 1.0)) - phase_slip(efolds)


__all__ = [
    "compensating_gradient_pct_per_m",
    "density_tolerance_pct",
    "gradient_phase_error",
    "phase_per_pct_density",
    "phase_slip",
    "phase_velocity_deficit",
]
