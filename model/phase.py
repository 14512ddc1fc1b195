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
    return _velocity_deficit(phase_slip(efolds), kp, z)


def phase_per_pct_density(kp: ArrayLike, xi: ArrayLike) -> np.ndarray:
    """k_p xi / 200 [rad per %]: phase change at xi for a 1 % density change, k_p ~ sqrt(n) (MODEL.md 5, heuristic)."""
    return _per_pct_density(np.asarray(kp, dtype=float) * xi)


def density_tolerance_pct(kp: ArrayLike, xi: ArrayLike, phase_tolerance: ArrayLike) -> np.ndarray:
    """100 * 2 dpsi_tol/(k_p xi) [%]: the density change moving the phase at xi by dpsi_tol (MODEL.md 5, heuristic)."""
    return _density_tolerance(np.asarray(kp, dtype=float) * xi, phase_tolerance)


def compensating_gradient_pct_per_m(efolds: ArrayLike, kp: ArrayLike, xi: ArrayLike, z: ArrayLike) -> np.ndarray:
    """100 * 4N/(3 sqrt(3) k_p xi z) [%/m]: k_p xi g/2 = d(N/sqrt(3))/dz cancels the slip rate (MODEL.md 5)."""
    return _compensating_gradient(phase_slip(efolds), np.asarray(kp, dtype=float) * xi, z)


def gradient_phase_error(
    kp: ArrayLike, xi: ArrayLike, gradient: ArrayLike, length: ArrayLike, efolds: ArrayLike
) -> np.ndarray:
    """k_p xi (sqrt(1 + g L) - 1) - N/sqrt(3) [rad]: phase error of a gradient g [1/m] over L (MODEL.md 5)."""
    return _gradient_error(np.asarray(kp, dtype=float) * xi, gradient, length, phase_slip(efolds))


def phase_outputs(
    efolds: ArrayLike,
    kp: ArrayLike,
    kp_xi: ArrayLike,
    z: ArrayLike,
    gradient: ArrayLike,
    length: ArrayLike,
    phase_tolerance: ArrayLike,
) -> dict[str, np.ndarray]:
    """The six section-5 outputs of the model table at once, sharing N/sqrt(3) and k_p xi (given, as the table has
    it); each exactly as its function above gives it (MODEL.md section 5)."""
    slip = phase_slip(efolds)
    kp_xi = np.asarray(kp_xi, dtype=float)
    return {
        "phase_slip_rad": slip,
        "phase_velocity_deficit": _velocity_deficit(slip, kp, z),
        "phase_per_pct_density_rad": _per_pct_density(kp_xi),
        "density_tolerance_pct": _density_tolerance(kp_xi, phase_tolerance),
        "compensating_gradient_pct_per_m": _compensating_gradient(slip, kp_xi, z),
        "gradient_phase_error_rad": _gradient_error(kp_xi, gradient, length, slip),
    }


def _velocity_deficit(slip: np.ndarray, kp: ArrayLike, z: ArrayLike) -> np.ndarray:
    return 2.0 * slip / (3.0 * np.asarray(kp, dtype=float) * np.asarray(z, dtype=float))


def _per_pct_density(kp_xi: ArrayLike) -> np.ndarray:
    return np.asarray(kp_xi, dtype=float) / 200.0


def _density_tolerance(kp_xi: np.ndarray, phase_tolerance: ArrayLike) -> np.ndarray:
    return 200.0 * np.asarray(phase_tolerance, dtype=float) / kp_xi


def _compensating_gradient(slip: np.ndarray, kp_xi: ArrayLike, z: ArrayLike) -> np.ndarray:
    return 400.0 * slip / (3.0 * np.asarray(kp_xi, dtype=float) * np.asarray(z, dtype=float))


def _gradient_error(kp_xi: ArrayLike, gradient: ArrayLike, length: ArrayLike, slip: np.ndarray) -> np.ndarray:
    gl = np.asarray(gradient, dtype=float) * length
    # sqrt(1 + gL) - 1 = gL / (sqrt(1 + gL) + 1), without the cancellation for a small gradient
    return np.asarray(kp_xi, dtype=float) * (gl / (np.sqrt(1.0 + gl) + 1.0)) - slip


__all__ = [
    "compensating_gradient_pct_per_m",
    "density_tolerance_pct",
    "gradient_phase_error",
    "phase_outputs",
    "phase_per_pct_density",
    "phase_slip",
    "phase_velocity_deficit",
]
