"""The long-beam growth law of MODEL.md section 4 against direct solutions of its equation and outside references.

The linearised envelope equation (k_p = 1 units, xi = distance behind the seed)
    delta_zz = A int_0^xi sin(xi - xi') delta(xi') dxi' + s sin(xi),   delta = delta_z = 0 at z = 0,
is solved two independent ways:
- directly: cumulative sin/cos moments in xi (the convolution) and velocity Verlet in z;
- exactly, by Laplace transform in xi: the transform of delta is
  s sum_m A^{m-1} z^{2m} / ((2m)! (p^2+1)^m), and 1/(p^2+1)^m inverts to
  sqrt(pi)/(m-1)! (xi/2)^{m-1/2} J_{m-1/2}(xi) (a table transform), giving a fast series.
The model's growth, delta = s z^2 |S(A xi z^2)| with S(x) = sum_k (-i x/2)^k / (k! (2k+2)!), is the
long-beam limit of that solution (for k_p xi >> 1 the Bessel functions turn into cosines); it is checked
against both, against mpmath's hypergeometric function (S(x) = 0F2(; 3/2, 2; -i x/8)/2), and its
large-N form against Kumar, Pukhov, Lotov, PRL 104, 255003 (2010); Schroeder et al., PRL 107, 145002
(2011); Pukhov et al., PRL 107, 145003 (2011).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import optimize, special

from model import growth

B = growth.GROWTH_PREFACTOR


def series_delta(xi, z, A=1.0, s=1.0, terms=160):
    """Exact delta(xi, z) from the Laplace-transform series (k_p = 1)."""
    xi = np.asarray(xi, dtype=float)[..., None]
    m = np.arange(1, terms + 1)
    log_magnitude = (
        (m - 1) * np.log(A)
        + 2 * m * np.log(z)
        + 0.5 * np.log(np.pi)
        + (m - 0.5) * np.log(xi / 2)
        - special.gammaln(2 * m + 1)
        - special.gammaln(m)
    )
    return s * np.sum(np.exp(log_magnitude) * special.jv(m - 0.5, xi), axis=-1)


def direct_delta(xi_max, z_end, A=1.0, s=1.0, dxi=0.01, dz=0.001):
    """delta(xi, z_end) by stepping the equation itself: trapezoid moments in xi, velocity Verlet in z."""
    xi = np.arange(0.0, xi_max + dxi / 2, dxi)
    cos, sin = np.cos(xi), np.sin(xi)

    def cumulative(f):
        return np.concatenate([[0.0], np.cumsum((f[1:] + f[:-1]) * dxi / 2)])

    def acceleration(d):
        return A * (sin * cumulative(cos * d) - cos * cumulative(sin * d)) + s * sin

    d = np.zeros_like(xi)
    v = np.zeros_like(xi)
    a = acceleration(d)
    for _ in range(int(round(z_end / dz))):
        v += 0.5 * dz * a
        d += dz * v
        a = acceleration(d)
        v += 0.5 * dz * a
    return xi, d


def direct_delta_at(xi_max, zs, A, s, dxi=0.02, max_dz=0.002):
    """delta(xi, z) at each z of zs (increasing), stepped as in direct_delta with the steps cut to land on each z."""
    xi = np.arange(0.0, xi_max + dxi / 2, dxi)
    cos, sin = np.cos(xi), np.sin(xi)

    def cumulative(f):
        return np.concatenate([[0.0], np.cumsum((f[1:] + f[:-1]) * dxi / 2)])

    def acceleration(d):
        return A * (sin * cumulative(cos * d) - cos * cumulative(sin * d)) + s * sin

    d, v, z, snapshots = np.zeros_like(xi), np.zeros_like(xi), 0.0, []
    a = acceleration(d)
    for z_next in zs:
        steps = max(1, math.ceil((z_next - z) / max_dz))
        dz = (z_next - z) / steps
        for _ in range(steps):
            v += 0.5 * dz * a
            d += dz * v
            a = acceleration(d)
            v += 0.5 * dz * a
        z = z_next
        snapshots.append(d.copy())
    return xi, snapshots


def series_prediction_ratio(xi, d, xi_centre, z, A, s):
    """Complex w with delta ~ Re(w P) over one plasma period, P = -i s z^2 e^{i xi} S(A xi z^2) the series' own
    signal (amplitude s z^2 |S| and phase): w = 1 if delta is the series."""
    window = (xi > xi_centre - np.pi) & (xi < xi_centre + np.pi)
    p = -1j * s * z * z * np.exp(1j * xi[window]) * growth.modulation_series(A * xi[window] * z * z)
    (re, im), *_ = np.linalg.lstsq(np.column_stack([p.real, -p.imag]), d[window], rcond=None)
    return complex(re, im)


def amplitude(xi_centre, z):
    """Largest |delta| over one plasma period around xi_centre (the modulation amplitude)."""
    xs = np.linspace(xi_centre - np.pi, xi_centre + np.pi, 64)
    return np.abs(series_delta(xs, z)).max()


def model_delta(xi, z, A=1.0, s=1.0):
    """The model's growth (MODEL.md section 4): delta = s z^2 |S(I z^2)| with I = A xi, and its e-folds N."""
    n = growth.efolds(A * xi, z)
    return np.exp(growth.log_mode_modulation(np.log(s), z, n)), n


def test_series_solution_agrees_with_direct_numerical_solution_of_the_linearised_equation():
    xi, d = direct_delta(40.0, 1.5)
    pick = np.arange(1000, 4001, 250)
    np.testing.assert_allclose(d[pick], series_delta(xi[pick], 1.5), rtol=2e-5, atol=2e-5)


def test_model_growth_follows_the_exact_solution_within_0_1_efolds_where_n_over_kp_xi_below_0_05():
    checked = 0
    for xi in (100.0, 200.0, 400.0):
        for n_target in (0.5, 2.0, 4.0, 6.0, 8.0, 10.0, 12.0):
            if n_target / xi >= 0.05:
                continue
            z = np.sqrt((n_target / B) ** 3 / xi)
            predicted, n = model_delta(xi, z)
            assert abs(np.log(amplitude(xi, z) / predicted)) < 0.1, (xi, n)
            checked += 1
    assert checked >= 12


@pytest.mark.parametrize("coupling, xi_centre, force", [(1.0, 200.0, 1e-3), (0.1, 300.0, 2.0)])
def test_series_follows_a_direct_numerical_solution_within_0_1_efolds_for_n_from_0_05_to_15(coupling, xi_centre, force):
    # The residual is the finite-length correction of the long-beam limit, growing like N^2/(k_p xi):
    # 0.07 e-folds at N = 15 for k_p xi = 200, 0.05 for k_p xi = 300.
    efolds = np.array([0.05, 0.2, 0.5, 1.0, 2.0, 4.0, 7.0, 10.0, 15.0])
    zs = np.sqrt((efolds / B) ** 3 / (coupling * xi_centre))
    xi, snapshots = direct_delta_at(xi_centre + 4.0, zs, coupling, force)
    for n, z, d in zip(efolds, zs, snapshots, strict=True):
        w = series_prediction_ratio(xi, d, xi_centre, z, coupling, force)
        assert abs(math.log(abs(w))) < 0.1 and abs(np.angle(w)) < 0.1, (n, w)


def test_without_coupling_the_modulation_is_the_seed_force_times_z_squared_over_two():
    # delta_zz = s sin(xi) with delta = delta_z = 0 at z = 0 gives delta = s z^2/2 sin(xi) exactly: the series'
    # first term 1/(0! 2!) = 1/2, and the direct solution with A = 0.
    z = np.array([1e-3, 0.1, 1.0, 30.0])
    np.testing.assert_allclose(np.exp(growth.log_mode_modulation(np.log(3.0), z, 0.0)), 3.0 * z * z / 2, rtol=1e-12)
    xi, (d,) = direct_delta_at(20.0, [2.0], 0.0, 3.0)
    np.testing.assert_allclose(d, 3.0 * 2.0**2 / 2 * np.sin(xi), atol=1e-12)
    # and the growth tends to it as the coupling goes to zero
    for n in (1e-3, 1e-2, 0.05):
        assert growth.log_series_magnitude(n) == pytest.approx(math.log(0.5), abs=3e-12 + 1e-3 * n**6)


def test_series_equals_mpmaths_hypergeometric_function_up_to_x_2e5():
    # S(x) = (1/2) 0F2(; 3/2, 2; -i x/8): mpmath.hyper, an outside reference (MODEL.md section 4)
    x = np.concatenate([[0.0], np.logspace(-4, np.log10(2e5), 60)])
    ours = growth.modulation_series(x)
    for xk, sk in zip(x, ours, strict=True):
        ref = complex(mpmath.hyper([], [1.5, 2], -1j * mpmath.mpf(xk) / 8) / 2)
        assert abs(sk / ref - 1) < 2e-10, xk


def test_the_models_ln_abs_s_is_the_series_below_n_60_and_its_asymptotic_form_above():
    # the table behind log_series_magnitude: within 1e-11 of mpmath's ln|S| for N <= 60; above, the
    # asymptotic form (5/2) ln(b/N) + N - ln(6 pi)/2, within 0.006 e-folds of the series there (MODEL.md section 4)
    for n in np.concatenate([np.linspace(0.0, 60.0, 241), [1e-3, 59.999, 60.0]]):
        ref = float(mpmath.log(abs(mpmath.hyper([], [1.5, 2], -1j * (mpmath.mpf(n) / B) ** 3 / 8) / 2)))
        assert growth.log_series_magnitude(n) == pytest.approx(ref, abs=1e-11), n
    for n in (60.0001, 61.0, 80.0, 120.0):
        ref = float(mpmath.log(abs(mpmath.hyper([], [1.5, 2], -1j * (mpmath.mpf(n) / B) ** 3 / 8) / 2)))
        asymptotic = 2.5 * math.log(B / n) + n - 0.5 * math.log(6 * math.pi)
        assert growth.log_series_magnitude(n) == pytest.approx(asymptotic, abs=1e-12)
        assert 0.0 < asymptotic - ref < 0.006


def test_growing_mode_phase_slips_back_by_n_over_root_3():
    # delta ~ amplitude * sin(xi - N/sqrt(3) + const) with const set by the seed, so
    # compare the phase change between two z at the same xi with the change of N/sqrt(3).
    xi = 400.0
    xs = np.linspace(xi - np.pi, xi + np.pi, 721)

    def phase(z):
        d = series_delta(xs, z)
        return np.angle(np.sum(d * np.exp(-1j * xs)))

    z1, z2 = np.sqrt((6 / B) ** 3 / xi), np.sqrt((10 / B) ** 3 / xi)
    slip = np.angle(np.exp(1j * (phase(z1) - phase(z2))))
    n1, n2 = growth.efolds(xi, z1), growth.efolds(xi, z2)
    assert abs(slip - (n2 - n1) / np.sqrt(3)) < 0.15


def _fitted_power(x, log_amp):
    """Fit ln delta = alpha + beta ln x + C x^p (the algebraic prefactor absorbed in beta) and return p."""

    def model(x, alpha, beta, c, p):
        return alpha + beta * np.log(x) + c * x**p

    params, _ = optimize.curve_fit(model, x, log_amp, p0=(0.0, 0.0, 1.0, 0.5), maxfev=20000)
    return params[3]


def test_efolds_grow_as_z_to_the_two_thirds():
    xi = 600.0
    zs = np.sqrt((np.linspace(6, 20, 12) / B) ** 3 / xi)
    log_amp = np.log([amplitude(xi, z) for z in zs])
    assert abs(_fitted_power(zs, log_amp) - 2 / 3) < 0.05


def test_efolds_grow_as_xi_to_the_one_third():
    z = np.sqrt((10 / B) ** 3 / 400.0)
    xis = np.linspace(300.0, 1500.0, 12)
    log_amp = np.log([amplitude(xi, z) for xi in xis])
    assert abs(_fitted_power(xis, log_amp) - 1 / 3) < 0.05


def test_the_saturation_point_inverts_the_growth_law_to_1e_9_without_a_per_shot_loop():
    # ln(x|S(x)|) = y for N, against mpmath.findroot on mpmath's hypergeometric S, one call for the whole array
    y = np.array([-40.0, -12.0, -10.5, -5.0, 0.0, 3.0, 10.0, 30.0, 50.0, 60.0])
    n = growth.efolds_at_log_target(y)
    for yk, nk in zip(y, n, strict=True):

        def f(m, yk=yk):
            return 3 * mpmath.log(m / B) + mpmath.log(abs(mpmath.hyper([], [1.5, 2], -1j * (m / B) ** 3 / 8) / 2)) - yk

        assert nk == pytest.approx(float(mpmath.findroot(f, nk)), rel=1e-9), yk
    # beyond the series the asymptotic form N + ln(N/b)/2 - ln(6 pi)/2 = y, which starts at N = 60
    y_far = np.array([61.0, 100.0, 1e4, 1e8])
    n_far = growth.efolds_at_log_target(y_far)
    np.testing.assert_allclose(n_far + 0.5 * np.log(n_far / B) - 0.5 * np.log(6 * np.pi), y_far, rtol=1e-14)
    assert np.all(n_far >= 60.0)


def test_saturation_length_is_where_the_first_of_the_two_modes_reaches_delta_sat():
    # MODEL.md section 4: delta = max(delta_seed, delta_noise) with the seeded mode's coupling the weaker one (it
    # grows from the seed, noise from the head); row 0 has a strong seed, row 1 a weak one.
    log_seed, log_noise, i_seed, i_noise = np.log([1e-2, 1e-9]), np.log([1e-9, 1e-6]), 5.0, 50.0
    saturated, log_delta_exit, z_ref, n_exit, n_ref, stn = growth.growth_to_saturation(
        log_seed, [i_seed, i_seed], log_noise, [i_noise, i_noise], [10.0, 10.0], 0.0
    )
    assert saturated.all() and np.all(z_ref < 10.0)
    seed_at_ref = growth.log_mode_modulation(log_seed, z_ref, growth.efolds(i_seed, z_ref))
    noise_at_ref = growth.log_mode_modulation(log_noise, z_ref, growth.efolds(i_noise, z_ref))
    np.testing.assert_allclose(np.maximum(seed_at_ref, noise_at_ref), 0.0, atol=1e-9)
    assert seed_at_ref[0] > noise_at_ref[0] and seed_at_ref[1] < noise_at_ref[1]
    np.testing.assert_allclose(stn, seed_at_ref - noise_at_ref, rtol=1e-12)
    np.testing.assert_allclose(n_ref, growth.efolds(i_seed, z_ref), rtol=1e-12)
