"""Linear long-beam growth of the self-modulation (MODEL.md section 4), in closed form.

Asymptotic solution of delta_zz = A int_zeta^{zeta_s} sin(k_p(zeta'-zeta)) delta(zeta') dzeta'
(Kumar, Pukhov, Lotov, PRL 104, 255003 (2010); Schroeder et al., PRL 107, 145002 (2011);
Pukhov et al., PRL 107, 145003 (2011)). Written in logarithms so that no e^N overflows.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

GROWTH_PREFACTOR = 3.0**1.5 / 4.0  # b in N = b (I z^2)^{1/3}
_LOG_DELTA_CONSTANT = -0.5 * np.log(GROWTH_PREFACTOR) - 0.5 * np.log(6.0 * np.pi)
_NEWTON_STEPS = 12  # cap; converges in 3-5 from the start below


def gaussian_profile_integral(upper: ArrayLike, lower: ArrayLike, sigma_z: ArrayLike) -> np.ndarray:
    """sigma_z sqrt(pi/2) [erf(upper/sqrt2 sigma_z) - erf(lower/sqrt2 sigma_z)] = int_lower^upper exp(-x^2/2 sigma_z^2) dx, via erfc so tails keep their digits (Gaussian integral)."""
    sigma_z = np.asarray(sigma_z, dtype=float)
    upper = np.asarray(upper, dtype=float)
    b = np.asarray(lower, dtype=float) / (np.sqrt(2.0) * sigma_z)
    if upper.ndim == 0 and upper == np.inf:  # no cut: one erfc
        return sigma_z * np.sqrt(np.pi / 2.0) * special.erfc(b)
    a = upper / (np.sqrt(2.0) * sigma_z)
    with np.errstate(invalid="ignore"):
        t = np.where(a + b >= 0.0, 1.0, -1.0)  # work on the side where erfc is small
    return sigma_z * np.sqrt(np.pi / 2.0) * t * (special.erfc(t * b) - special.erfc(t * a))


def efolds(integrated_coupling: ArrayLike, z: ArrayLike) -> np.ndarray:
    """Number of e-folds N(z) = (3^{3/2}/4) (I z^2)^{1/3} (MODEL.md section 4; Schroeder et al., PRL 107, 145002 (2011))."""
    z = np.asarray(z, dtype=float)
    return GROWTH_PREFACTOR * np.cbrt(np.asarray(integrated_coupling, dtype=float) * z * z)


def log_modulation_scale(log_seed_force: ArrayLike, integrated_coupling: ArrayLike) -> np.ndarray:
    """ln K with delta = K sqrt(N) e^N, i.e. delta(z) = s z^2 (3^{3/2}/4N)^{5/2} e^N / sqrt(6 pi) rewritten with z^2 = N^3/(b^3 I) (MODEL.md section 4)."""
    return np.asarray(log_seed_force, dtype=float) - np.log(integrated_coupling) + _LOG_DELTA_CONSTANT


def log_modulation(log_scale: ArrayLike, n_efolds: ArrayLike) -> np.ndarray:
    """ln delta = ln K + N + (1/2) ln N (MODEL.md section 4)."""
    n = np.asarray(n_efolds, dtype=float)
    return np.asarray(log_scale, dtype=float) + n + 0.5 * np.log(n)


def efolds_at_modulation(log_target: ArrayLike) -> np.ndarray:
    """Solve N + (1/2) ln N = y for N > 0 (y = ln(delta_sat/K)): vectorised Newton in x = ln N on the convex e^x + x/2 - y."""
    y = np.asarray(log_target, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        x = np.where(y > 1.0, np.log(np.maximum(y - 0.5 * np.log(np.maximum(y, 1.0)), 1.0)), 2.0 * y - 2.0 * np.exp(np.minimum(2.0 * y, 0.0)))
        # Each element stops once its own step is below rounding, so a shot gets the same
        # N whether it is solved alone or in a table (the loop count depends on the batch).
        active = np.ones(y.shape, bool)
        for _ in range(_NEWTON_STEPS):
            ex = np.exp(x)
            step = (ex + 0.5 * x - y) / (ex + 0.5)
            active &= np.abs(step) > 1e-15 * np.maximum(1.0, np.abs(x))
            if not active.any():
                break
            x = x - np.where(active, step, 0.0)
    return np.exp(x)
