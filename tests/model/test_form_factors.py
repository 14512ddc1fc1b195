"""Transverse form factors of a Gaussian slice (MODEL.md sections 2 and 10)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, special

from model.form_factors import (
    driver_slice_factors,
    envelope_growth_factor,
    envelope_seed_factor,
    gaussian_on_axis_factor,
    scaled_exponential_integral,
    slice_form_factors,
    wake_kernel_h,
)

MODERATE_U = np.concatenate([np.logspace(-9, np.log10(600), 400), [1.0, 2.0, 4.0, 8.0, 7.999999, 8.000001]])


def test_on_axis_factor_equals_direct_integral_of_the_k0_greens_function():
    # Keinigs & Jones, Phys. Fluids 30, 252 (1987): the linear wake of a thin ring at r' has the radial
    # Green's function k_p^2 K_0(k_p r) (on axis, r < r' gives I_0(0)=1). Summed over a Gaussian slice
    # exp(-r^2/2 sigma^2) and normalised so that a wide slice gives the 1D wake (int_0^inf K_0(x) x dx = 1):
    #   (k_p sigma)^2 R(a) = k_p^2 int_0^inf K_0(k_p r) exp(-r^2/2 sigma^2) r dr,
    # i.e. R(a) = sigma^-2 int_0^inf K_0(k_p r) exp(-r^2/2 sigma^2) r dr with a = (k_p sigma)^2/2.
    # With r = sigma x: R(a) = int_0^inf K_0(k_p sigma x) exp(-x^2/2) x dx.
    k_p = 1.0
    for sigma in (0.01, 0.1, 0.3, 1.0, 2.0, 5.0):

        def integrand(x, sigma=sigma):
            return special.k0(k_p * sigma * x) * np.exp(-x * x / 2) * x

        value = sum(
            integrate.quad(integrand, lo, hi, epsabs=0, epsrel=1e-12, limit=400)[0] for lo, hi in ((0, 1), (1, 40))
        )
        assert gaussian_on_axis_factor((k_p * sigma) ** 2 / 2) == pytest.approx(value, rel=1e-10)


def test_wide_slice_gives_the_one_dimensional_wake_and_narrow_slice_the_log():
    # int_0^inf K_0(x) x dx = 1: (k_p sigma)^2 R -> 1 for a wide slice; R ~ -(ln a + Euler gamma)/2 for a narrow one
    a = np.array([1e3, 1e5])
    np.testing.assert_allclose(2 * a * gaussian_on_axis_factor(a), 1.0, rtol=1e-3)
    a = 1e-8
    assert gaussian_on_axis_factor(a) == pytest.approx(-(np.log(a) + np.euler_gamma) / 2, rel=1e-7)


def test_scaled_exponential_integral_matches_scipy_where_scipy_does_not_underflow():
    # scipy.special.exp1 (Abramowitz & Stegun 5.1.1)
    np.testing.assert_allclose(
        scaled_exponential_integral(MODERATE_U), np.exp(MODERATE_U) * special.exp1(MODERATE_U), rtol=2e-14
    )


def test_scaled_exponential_integral_never_overflows_for_huge_u():
    # Abramowitz & Stegun 5.1.51: e^u E1(u) ~ 1/u - 1/u^2 + 2/u^3 - 6/u^4 for large u
    u = np.array([1e3, 1e6, 1e12, 1e60])
    with np.errstate(all="raise"):
        g = scaled_exponential_integral(u)
    np.testing.assert_allclose(g, 1 / u - 1 / u**2 + 2 / u**3 - 6 / u**4, rtol=1e-10)


def test_wake_kernel_h_equals_its_integral_form_for_small_and_large_u():
    # MODEL.md section 10: h(u) = 1/u - e^u E1(u) = int_0^inf e^{-ut} t/(1+t) dt
    # = (1/u) int_0^inf e^{-s} s/(u+s) ds with t = s/u (so quad sees an O(1) scale).
    for u in (1e-6, 1e-3, 0.1, 1.0, 3.0, 7.9, 8.1, 30.0, 300.0, 1e4):

        def integrand(s, u=u):
            return np.exp(-s) * s / (u + s)

        value = (
            sum(
                integrate.quad(integrand, lo, hi, epsabs=0, epsrel=1e-13, limit=400)[0]
                for lo, hi in ((0, min(u, 1.0)), (min(u, 1.0), 60))
            )
            / u
        )
        assert wake_kernel_h(u) == pytest.approx(value, rel=1e-11)


def test_seed_and_growth_factors_have_their_narrow_and_wide_limits():
    # MODEL.md section 2: H -> 1 and F -> 1 for narrow beams, F -> 2/u for wide ones
    assert envelope_seed_factor(1e-10) == pytest.approx(1.0, abs=1e-8)
    assert envelope_growth_factor(1e-10) == pytest.approx(1.0, abs=1e-9)
    u = np.array([1e4, 1e8])
    np.testing.assert_allclose(envelope_growth_factor(u), 2 / u, rtol=1e-3)
    assert np.all(envelope_growth_factor(np.logspace(-6, 12, 200)) > 0)


def test_seed_and_growth_factors_equal_their_definitions_in_e1():
    u = MODERATE_U[MODERATE_U < 60]
    g = np.exp(u) * special.exp1(u)
    np.testing.assert_allclose(envelope_seed_factor(u), 1 - u * g, rtol=1e-11)
    np.testing.assert_allclose(envelope_growth_factor(u), 1 - u + u * u * g, rtol=1e-9)


def test_form_factors_work_on_scalars_and_any_array_shape():
    assert isinstance(float(wake_kernel_h(2.0)), float)
    grid = np.array([[0.5, 2.0], [9.0, 100.0]])
    g, h, big_h, f = slice_form_factors(grid)
    assert g.shape == h.shape == big_h.shape == f.shape == (2, 2)
    assert h[1, 0] == wake_kernel_h(9.0)


def test_the_cores_tabulated_driver_factors_equal_the_exact_forms_to_1e_12():
    # driver_slice_factors (a cubic table in ln u, model.tables) against the exact forms it was built from, inside
    # the table (1e-6 <= u <= 1e4) and beyond it, where it falls back to them; no outside reference beyond those above
    u = np.concatenate([np.logspace(-9, 7, 20001), [1e-6, 1e4, 1e-6 * (1 + 1e-15), 1e4 * (1 - 1e-15)]])
    on_axis, seed_factor, growth_factor = driver_slice_factors(u)
    np.testing.assert_allclose(on_axis, u * gaussian_on_axis_factor(u / 2), rtol=1e-12)
    np.testing.assert_allclose(seed_factor, envelope_seed_factor(u), rtol=1e-12)
    np.testing.assert_allclose(growth_factor, envelope_growth_factor(u), rtol=1e-12)
    assert driver_slice_factors(2.0)[1] == pytest.approx(float(envelope_seed_factor(2.0)), rel=1e-12)
