"""Linear long-beam growth of the self-modulation (MODEL.md section 4), in closed form.

Asymptotic solution of delta_zz = A int_zeta^{zeta_s} sin(k_p(zeta'-zeta)) delta(zeta') dzeta'
(Kumar, Pukhov, Lotov, PRL 104, 255003 (2010); Schroeder et al., PRL 107, 145002 (2011);
Pukhov et al., PRL 107, 145003 (2011)). Written in logarithms so that no e^N overflows.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c
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


def coupling_per_density(
    charge_number: ArrayLike, gamma: ArrayLike, mass: ArrayLike, plasma_density: ArrayLike
) -> np.ndarray:
    """nu(n) / n = Z^2 m_e / (gamma M n_0) [m^3]: the beam-plasma coupling of a slice per unit local peak density (MODEL.md section 2)."""
    z = np.asarray(charge_number, dtype=float)
    return (
        z
        * z
        * _c.m_e
        / (np.asarray(gamma, dtype=float) * np.asarray(mass, dtype=float) * np.asarray(plasma_density, dtype=float))
    )


def profile_integral_from_start(
    zeta_ref: ArrayLike, sigma_z: ArrayLike, front: ArrayLike, zeta_front: ArrayLike
) -> np.ndarray:
    """int exp(-zeta^2/2 sigma_z^2) dzeta from the start point down to zeta_ref; the start is the front zeta_s where it cuts the bunch, else +inf (MODEL.md section 4)."""
    zeta_ref, sigma_z, front, zeta_front = np.broadcast_arrays(
        np.asarray(zeta_ref, dtype=float), np.asarray(sigma_z, dtype=float), front, np.asarray(zeta_front, dtype=float)
    )
    shape = zeta_ref.shape
    zeta_ref, sigma_z, front, zeta_front = (x.reshape(-1) for x in (zeta_ref, sigma_z, front, zeta_front))
    integral = gaussian_profile_integral(np.inf, zeta_ref, sigma_z)
    rows = np.nonzero(front)[0]
    if rows.size:  # the front cuts the bunch: integrate from zeta_s, not from +inf
        integral[rows] = gaussian_profile_integral(zeta_front[rows], zeta_ref[rows], sigma_z[rows])
    return integral.reshape(shape)[()]


def integrated_coupling(
    kp: ArrayLike,
    coupling_per_density: ArrayLike,
    peak_density: ArrayLike,
    profile_integral: ArrayLike,
    growth_factor: ArrayLike,
) -> np.ndarray:
    """I = (k_p^3/4) F(u) (Z^2 m_e/(gamma M)) (n_b0/n_0) int exp(-zeta^2/2 sigma_z^2) dzeta [1/m^2] (MODEL.md section 4)."""
    kp = np.asarray(kp, dtype=float)
    return 0.25 * kp**3 * coupling_per_density * peak_density * profile_integral * growth_factor


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


def saturation_reference(
    log_scale: ArrayLike, efolds_exit: ArrayLike, length: ArrayLike, log_saturation: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(saturated, ln delta(L), N(z_ref), z_ref) with z_ref solving delta(z_ref) = delta_sat where delta(L) >= delta_sat, else z_ref = L (MODEL.md section 4)."""
    log_scale, n_exit, length = (
        np.atleast_1d(x)
        for x in np.broadcast_arrays(
            np.asarray(log_scale, dtype=float), np.asarray(efolds_exit, dtype=float), np.asarray(length, dtype=float)
        )
    )
    log_delta_exit = log_modulation(log_scale, n_exit)
    saturated = log_delta_exit >= log_saturation
    n_ref = n_exit.copy()
    rows = np.nonzero(saturated)
    if rows[0].size:
        n_sat = efolds_at_modulation(log_saturation - log_scale[rows])
        n_ref[rows] = np.minimum(n_sat, n_exit[rows])
    z_ref = np.where(saturated, length * (n_ref / n_exit) ** 1.5, length)
    return saturated, log_delta_exit, n_ref, z_ref


def hosing_efolds_ratio(seed_factor: ArrayLike, growth_factor: ArrayLike) -> np.ndarray:
    """N_h / N = (H(u) / F(u))^{1/3}: hosing grows with the dipole coupling H(u) in place of F(u) (MODEL.md section 4)."""
    return np.cbrt(np.asarray(seed_factor, dtype=float) / growth_factor)


def wakefield_estimate(
    wavebreaking_field: ArrayLike,
    reference_density: ArrayLike,
    plasma_density: ArrayLike,
    kp: ArrayLike,
    sigma_r: ArrayLike,
    seed_factor_a: ArrayLike,
    xi: ArrayLike,
    efolds_ref: ArrayLike,
    modulation: ArrayLike,
) -> np.ndarray:
    """E_wake = E_0 (n_ref/n_0) (k_p sigma_r)^2 H(a) (3 k_p xi / (2 N(z_ref))) min(delta(z_ref), delta_sat) [V/m] (MODEL.md section 4, project heuristic)."""
    kp = np.asarray(kp, dtype=float)
    kp_sigma_r = kp * np.asarray(sigma_r, dtype=float)
    kp_xi = kp * np.asarray(xi, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (
            wavebreaking_field
            * (reference_density / np.asarray(plasma_density, dtype=float))
            * (kp_sigma_r * kp_sigma_r)
            * seed_factor_a
            * (1.5 * kp_xi / efolds_ref)
            * modulation
        )


def efolds_at_modulation(log_target: ArrayLike) -> np.ndarray:
    """Solve N + (1/2) ln N = y for N > 0 (y = ln(delta_sat/K)): vectorised Newton in x = ln N on the convex e^x + x/2 - y."""
    y = np.asarray(log_target, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        x = np.where(
            y > 1.0,
            np.log(np.maximum(y - 0.5 * np.log(np.maximum(y, 1.0)), 1.0)),
            2.0 * y - 2.0 * np.exp(np.minimum(2.0 * y, 0.0)),
        )
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
