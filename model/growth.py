"""Linear long-beam growth of the self-modulation (MODEL.md section 4).

The linearised envelope equation delta_zz = A int_zeta^{zeta_s} sin(k_p(zeta'-zeta)) delta(zeta') dzeta'
driven by a constant seed force s has, for a long beam, the solution
    delta = s z^2 |S(I z^2)|,  S(x) = sum_k (-i x/2)^k / (k! (2k+2)!) = (1/2) 0F2(; 3/2, 2; -i x/8),
with I the coupling integrated from the start point; N = (3^{3/2}/4)(I z^2)^{1/3} e-folds, and for
N >> 1 the asymptotic form of Kumar, Pukhov, Lotov, PRL 104, 255003 (2010); Schroeder et al.,
PRL 107, 145002 (2011); Pukhov et al., PRL 107, 145003 (2011).

Numerics. ln|S| is read from a piecewise-cubic (Hermite) table in N built at import from the
series itself (8192 intervals on 0 <= N <= 60, within 3e-12 of the series); above N = 60 the
asymptotic form is used, as MODEL.md says. The saturation point inverts the monotone
ln(x|S(x)|) = ln(delta_sat I / s) by a cubic inverse table plus one Newton step (within 1e-12
in N), with no per-shot Python loop. Everything is in logarithms so that no e^N overflows.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c
from scipy import special

from model.tables import cubic_value_and_slope, cubic_values, hermite_rows

GROWTH_PREFACTOR = 3.0**1.5 / 4.0  # b in N = b (I z^2)^{1/3}
SERIES_EFOLDS_LIMIT = 60.0  # the series below (and at) this N, its asymptotic form above (MODEL.md section 4)

_B = GROWTH_PREFACTOR
_LOG_B = math.log(_B)
_LOG_HALF = math.log(0.5)
_HALF_LOG_6PI = 0.5 * math.log(6.0 * math.pi)
_SQRT_2PI = math.sqrt(2.0 * math.pi)


def gaussian_profile_integrals(upper: ArrayLike, lower: ArrayLike, sigma_z: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """(int_lower^upper, int_lower^inf) exp(-x^2/2 sigma_z^2) dx from the normal CDF, tails kept (Gaussian integral)."""
    sigma_z = np.asarray(sigma_z, dtype=float)
    a = np.asarray(upper, dtype=float) / sigma_z
    b = np.asarray(lower, dtype=float) / sigma_z
    # Phi(a) - Phi(b) = Phi(-b) - Phi(-a): t = +1 in the upper tail, -1 in the lower one
    t = np.copysign(1.0, a + b)
    minus_t = -t
    cdf_a = special.ndtr(minus_t * a)
    cdf_b = special.ndtr(minus_t * b)
    scale = _SQRT_2PI * sigma_z
    between = (scale * t) * (cdf_b - cdf_a)
    # Phi(-b) = 1 - Phi(b): exact enough where b < 0, since Phi(-b) is then at least 1/2
    from_infinity = scale * np.where(t > 0.0, cdf_b, 1.0 - cdf_b)
    return between, from_infinity


def coupling_per_density(
    charge_number: ArrayLike, gamma: ArrayLike, mass: ArrayLike, plasma_density: ArrayLike
) -> np.ndarray:
    """nu(n) / n = Z^2 m_e / (gamma M n_0) [m^3]: a slice's coupling per unit local density (MODEL.md section 2)."""
    z = np.asarray(charge_number, dtype=float)
    return (
        z
        * z
        * _c.m_e
        / (np.asarray(gamma, dtype=float) * np.asarray(mass, dtype=float) * np.asarray(plasma_density, dtype=float))
    )


def integrated_coupling(
    kp: ArrayLike,
    coupling_per_density: ArrayLike,
    peak_density: ArrayLike,
    profile_integral: ArrayLike,
    growth_factor: ArrayLike,
) -> np.ndarray:
    """I = (k_p^3/4) F(u) (Z^2 m_e/(gamma M)) (n_b0/n_0) int e^{-zeta^2/2 sigma_z^2} dzeta [1/m^2] (MODEL.md 4)."""
    kp = np.asarray(kp, dtype=float)
    density_terms = np.asarray(coupling_per_density, dtype=float) * np.asarray(peak_density, dtype=float)
    return (
        0.25
        * kp**3
        * density_terms
        * np.asarray(profile_integral, dtype=float)
        * np.asarray(growth_factor, dtype=float)
    )


def efolds(integrated_coupling: ArrayLike, z: ArrayLike) -> np.ndarray:
    """e-folds N(z) = (3^{3/2}/4) (I z^2)^{1/3} (MODEL.md section 4; Schroeder et al., PRL 107, 145002 (2011))."""
    z = np.asarray(z, dtype=float)
    return _B * np.cbrt(np.asarray(integrated_coupling, dtype=float) * z * z)


def modulation_series(x: ArrayLike) -> np.ndarray:
    """S(x) = sum_k (-i x/2)^k / (k! (2k+2)!) = 0F2(; 3/2, 2; -i x/8)/2, 0 <= x <= 2e5 (MODEL.md section 4)."""
    return _series_and_derivative(x)[0]


def _series_and_derivative(x: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """S(x) and dS/dx by direct summation until every term is below 1e-17 of the sum (N <= 76: no overflow)."""
    x = np.asarray(x, dtype=float)
    term_over_x = np.zeros(x.shape, dtype=complex)
    term = np.full(x.shape, 0.5 + 0.0j)
    total = term.copy()
    derivative = np.zeros(x.shape, dtype=complex)
    k = 0
    while True:
        k += 1
        term_over_x = term * (-0.5j / (k * (2 * k + 1) * (2 * k + 2)))  # term_k / x
        term = term_over_x * x
        total += term
        derivative += k * term_over_x
        peak_k = np.cbrt(np.max(x, initial=0.0) / 8.0)  # the terms peak near k = (x/8)^{1/3}
        if k > 2 * peak_k + 4 and np.all(np.abs(term) <= 1e-17 * np.abs(total)):
            return total, derivative


_TABLE_INTERVALS = 8192
_TABLE_STEP = SERIES_EFOLDS_LIMIT / _TABLE_INTERVALS
_INVERSE_INTERVALS = 8192
_INVERSE_LOW_EFOLDS = 0.05  # below: N = b (2 e^y)^{1/3}, as |S| = 1/2 to 1e-12 there


def _series_tables() -> tuple[np.ndarray, np.ndarray, float, float, float]:
    """The table of ln|S| in N, and the inverse table of N in y = ln(x|S(x)|) = 3 ln(N/b) + ln|S|, range and step."""
    n = np.linspace(0.0, SERIES_EFOLDS_LIMIT, _TABLE_INTERVALS + 1)
    x = (n / _B) ** 3
    s, ds = _series_and_derivative(x)
    log_s = np.log(np.abs(s))
    dlog_s_dn = (ds / s).real * 3.0 * n * n / _B**3
    forward = hermite_rows(log_s, dlog_s_dn, _TABLE_STEP)
    # y(N) is increasing (delta grows with z): checked here, relied on by the inversion.
    y_nodes = 3.0 * np.log(np.maximum(n[1:], 1e-300) / _B) + log_s[1:]
    if not np.all(np.diff(y_nodes) > 0.0):
        raise RuntimeError("ln(x|S(x)|) is not increasing on the table: the inversion would be ambiguous")

    def y_and_slope(roots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        value, slope = cubic_value_and_slope(forward, roots / _TABLE_STEP)
        return 3.0 * np.log(roots / _B) + value, 3.0 / roots + slope / _TABLE_STEP

    y_low = float(y_and_slope(np.array([_INVERSE_LOW_EFOLDS]))[0][0])
    y_high = float(y_nodes[-1])
    y = np.linspace(y_low, y_high, _INVERSE_INTERVALS + 1)
    roots = np.interp(y, y_nodes, n[1:])
    roots[0] = _INVERSE_LOW_EFOLDS
    for _ in range(8):  # Newton on the forward table, to rounding
        value, slope = y_and_slope(roots)
        roots = roots - (value - y) / slope
    step = (y_high - y_low) / _INVERSE_INTERVALS
    return forward, hermite_rows(roots, 1.0 / y_and_slope(roots)[1], step), y_low, y_high, step


def _asymptotic_log_series(n: np.ndarray) -> np.ndarray:
    """ln|S| ~ (5/2) ln(b/N) + N - (1/2) ln(6 pi) for N >> 1 (MODEL.md section 4)."""
    return 2.5 * (_LOG_B - np.log(n)) + n - _HALF_LOG_6PI


_FORWARD, _INVERSE, _Y_LOW, _Y_SERIES_END, _Y_STEP = _series_tables()


def log_series_magnitude(efolds: ArrayLike) -> np.ndarray:
    """ln|S(x)| at x = (N/b)^3: the series for N <= 60 (its table, to 3e-12), the asymptotic form above (MODEL.md 4)."""
    n = np.asarray(efolds, dtype=float)
    flat = n.reshape(-1)
    (value,) = cubic_values(_FORWARD, flat * (1.0 / _TABLE_STEP))
    large = np.flatnonzero(flat > SERIES_EFOLDS_LIMIT)
    if large.size:
        value[large] = _asymptotic_log_series(flat[large])
    return value.reshape(n.shape)[()]


def log_mode_modulation(log_force: ArrayLike, z: ArrayLike, efolds: ArrayLike) -> np.ndarray:
    """ln D, D(s, I, z) = s z^2 |S(I z^2)|: a mode's radius modulation, efolds = N(z) (MODEL.md section 4)."""
    z = np.asarray(z, dtype=float)
    with np.errstate(divide="ignore"):  # z = 0: no modulation yet, ln D = -inf
        log_z2 = 2.0 * np.log(z)
    return _log_modulation(log_z2, log_force, log_series_magnitude(efolds))[()]


def _log_modulation(log_z2: np.ndarray, log_force: ArrayLike, log_series: np.ndarray) -> np.ndarray:
    """ln D = ln z^2 + ln s + ln|S| from its three terms, summed in that order."""
    log_d = log_z2 + log_force
    log_d += log_series
    return log_d


def efolds_at_log_target(log_target: ArrayLike) -> np.ndarray:
    """N solving ln(x|S(x)|) = y, x = (N/b)^3: where D(s, I, z) = e^y s/I, to 1e-11 (MODEL.md section 4)."""
    y = np.asarray(log_target, dtype=float)
    flat = y.reshape(-1)
    (root,) = cubic_values(_INVERSE, np.maximum(flat - _Y_LOW, 0.0) * (1.0 / _Y_STEP))
    np.minimum(root, SERIES_EFOLDS_LIMIT, out=root)
    low = np.flatnonzero(flat < _Y_LOW)
    if low.size:  # below the table: |S| = 1/2, x/2 = e^y
        with np.errstate(under="ignore"):
            root[low] = _B * np.exp((flat[low] - _LOG_HALF) * (1.0 / 3.0))
    beyond = np.flatnonzero(flat > _Y_SERIES_END)
    if beyond.size:
        # Past the series: the asymptotic form. Between the two forms' values at N = 60 (they differ by
        # 0.005) the modulation jumps past the target at N = 60 itself.
        root[beyond] = np.maximum(_asymptotic_efolds_at(flat[beyond]), SERIES_EFOLDS_LIMIT)
    return root.reshape(y.shape)[()]


def _asymptotic_efolds_at(y: np.ndarray) -> np.ndarray:
    """N solving N + (1/2) ln(N/b) - (1/2) ln(6 pi) = y, for y above the series' end (N >~ 60): three Newton steps."""
    rhs = y + 0.5 * _LOG_B + _HALF_LOG_6PI
    n = np.maximum(rhs - 0.5 * np.log(np.maximum(rhs, 1.0)), 1.0)
    for _ in range(3):
        n = n - (n + 0.5 * np.log(n) - rhs) / (1.0 + 0.5 / n)
    return n


def _saturation_distance(
    log_force: np.ndarray, coupling: np.ndarray, length: np.ndarray, efolds_exit: np.ndarray, log_saturation: float
) -> np.ndarray:
    """z where one mode reaches delta_sat: ln(x|S(x)|) = ln(delta_sat I/s), z = L (N*/N(L))^{3/2} (MODEL.md 4)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        q = efolds_at_log_target(log_saturation - log_force + np.log(coupling)) / efolds_exit
    return length * q * np.sqrt(q)


def growth_to_saturation(
    log_force_seeded: ArrayLike,
    coupling_seeded: ArrayLike,
    log_force_noise: ArrayLike,
    coupling_noise: ArrayLike,
    length: ArrayLike,
    log_saturation: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """delta(z) = max(D(s_seed, I_seed, z), D(s_noise, I_noise, z)) grown to saturation or the exit (MODEL.md 4).

    Returns (saturated, ln delta(L), z_ref, N_seed(L), N_seed(z_ref), ln(delta_seed/delta_noise) at z_ref),
    z_ref solving delta(z_ref) = delta_sat where delta(L) >= delta_sat, else L. Pass the noise mode as the seeded
    one for an unseeded shot (its reported mode is noise; the last output is then 0). Couplings must be > 0.
    """
    log_seed, i_seed, log_noise, i_noise, length = (
        np.atleast_1d(np.asarray(x, dtype=float))
        for x in (log_force_seeded, coupling_seeded, log_force_noise, coupling_noise, length)
    )
    # With the same coupling the larger force leads at every z: one mode. Only the other rows (electron-bunch
    # seeds: the seeded mode grows from the seed, noise from the head) follow both.
    two = np.flatnonzero(i_seed != i_noise)
    log_lead = np.maximum(log_seed, log_noise)
    log_lead[two] = log_seed[two]
    n_exit = efolds(i_seed, length)
    with np.errstate(divide="ignore"):  # L = 0 (a growth curve's start): no modulation yet, ln D = -inf
        log_l2 = 2.0 * np.log(length)
    series_exit = log_series_magnitude(n_exit)
    log_delta_exit = _log_modulation(log_l2, log_lead, series_exit)
    n_noise_exit = efolds(i_noise[two], length[two])
    series_noise_exit = log_series_magnitude(n_noise_exit)
    log_delta_exit[two] = np.maximum(
        log_delta_exit[two], _log_modulation(log_l2[two], log_noise[two], series_noise_exit)
    )
    saturated = log_delta_exit >= log_saturation
    z_ref = length.copy()
    sat = np.flatnonzero(saturated)
    if sat.size:
        z_ref[sat] = np.minimum(
            _saturation_distance(log_lead[sat], i_seed[sat], length[sat], n_exit[sat], log_saturation), length[sat]
        )
        saturated_two = np.flatnonzero(saturated[two])
        both = two[saturated_two]
        z_noise = _saturation_distance(
            log_noise[both], i_noise[both], length[both], n_noise_exit[saturated_two], log_saturation
        )
        z_ref[both] = np.minimum(z_ref[both], z_noise)
    # N ~ z^{2/3}: only rows whose z_ref moved from L shrink (elsewhere the factor is exactly 1)
    with np.errstate(invalid="ignore"):  # L = 0: z_ref/L is NaN, and so is N
        ratio = z_ref / length
        moved = np.flatnonzero(ratio != 1.0)
        shrink = np.ones_like(ratio)
        shrink[moved] = np.cbrt(ratio[moved] ** 2)
    n_seed_ref = n_exit * shrink
    seed_over_noise = log_seed - log_noise  # ln(s_seed/s_noise): exact where the couplings are the same
    # ... and where not, the series at z_ref: those at the exit where z_ref is L
    series_seed_ref = series_exit[two]
    series_noise_ref = series_noise_exit.copy()
    moved_two = np.flatnonzero(shrink[two] != 1.0)
    series_seed_ref[moved_two] = log_series_magnitude(n_seed_ref[two[moved_two]])
    series_noise_ref[moved_two] = log_series_magnitude(n_noise_exit[moved_two] * shrink[two[moved_two]])
    seed_over_noise[two] += series_seed_ref - series_noise_ref
    return saturated, log_delta_exit, z_ref, n_exit, n_seed_ref, seed_over_noise


def hosing_efolds_ratio(seed_factor: ArrayLike, growth_factor: ArrayLike) -> np.ndarray:
    """N_h / N = (H(u) / F(u))^{1/3}: hosing grows with the dipole coupling H(u) in place of F(u) (MODEL.md 4)."""
    return np.cbrt(np.asarray(seed_factor, dtype=float) / growth_factor)


def wakefield_estimate(
    wavebreaking_field: ArrayLike,
    charge_density_ratio_ref: ArrayLike,
    on_axis_factor: ArrayLike,
    kp_xi: ArrayLike,
    efolds_ref: ArrayLike,
    modulation: ArrayLike,
) -> np.ndarray:
    """E_0 (|Z| n_ref/n_0) (k_p sigma_r)^2 R(a) k_p xi min(3/2N, 1) min(delta, delta_sat) [V/m] (MODEL.md 4)."""
    with np.errstate(divide="ignore"):  # N = 0: the stretch is capped at xi
        coherent_stretch = np.minimum(1.5 / np.asarray(efolds_ref, dtype=float), 1.0)
    field = np.asarray(wavebreaking_field, dtype=float) * np.asarray(charge_density_ratio_ref, dtype=float)
    return (
        field * np.asarray(on_axis_factor, dtype=float) * np.asarray(kp_xi, dtype=float) * coherent_stretch * modulation
    )


__all__ = [
    "GROWTH_PREFACTOR",
    "SERIES_EFOLDS_LIMIT",
    "coupling_per_density",
    "efolds",
    "efolds_at_log_target",
    "gaussian_profile_integrals",
    "growth_to_saturation",
    "hosing_efolds_ratio",
    "integrated_coupling",
    "log_mode_modulation",
    "log_series_magnitude",
    "modulation_series",
    "wakefield_estimate",
]
