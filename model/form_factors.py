"""Transverse form factors of a Gaussian slice (MODEL.md sections 2 and 10).

g(u) = e^u E1(u) is the scaled exponential integral (E1 as scipy.special.exp1). It is
evaluated without overflow and fast (numpy only, no per-element special-function call):
- u < 1: the convergent series E1(u) = -gamma - ln u + sum_k (-1)^{k+1} u^k / (k k!)
  (Abramowitz & Stegun 5.1.11), 18 terms;
- 1 <= u < 8: one Chebyshev interpolant per octave [2^j, 2^{j+1}), degree 18, built at
  import time from scipy.special.exp1;
- u >= 8: the even continued fraction (Abramowitz & Stegun 5.1.22)
  e^u E1(u) = 1/(u+1- 1^2/(u+3- 2^2/(u+5- ...))), 16 levels, evaluated backwards.
Relative accuracy is better than 1e-14 everywhere (checked in tests/model).

Writing g = 1/(u+1-r), with r the tail of the fraction, gives cancellation-free forms
of the other factors for large u:
   h = 1/u - g = g (1 - r) / u,   H = 1 - u g = u h = g (1 - r),
   F = 1 - u + u^2 g = g (1 + r (u - 1)).
All functions take u > 0 (scalars or arrays) and return NaN for NaN input.

The closed form's vectorised core reads the driver's three factors (k_p sigma_r)^2 R(a), H(u)
and F(u) from one cubic table in ln u built from these exact forms (driver_slice_factors:
within 1e-12 on 1e-6 <= u <= 1e4, the exact forms outside); everything else uses the exact forms.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.polynomial import chebyshev as _cheb
from numpy.typing import ArrayLike
from scipy import special

from model.tables import cubic_values, hermite_rows

_SERIES_TERMS = 18
_CF_THRESHOLD = 8.0
_CF_DEPTH = 16
_OCTAVES = 3  # [1,2), [2,4), [4,8)
_CHEB_DEGREE = 18

# Horner coefficients of sum_{k>=1} (-1)^{k+1} u^{k-1} / (k k!), highest power first.
_SERIES = [(-1.0) ** (k + 1) / (k * special.factorial(k)) for k in range(_SERIES_TERMS, 0, -1)]


def _octave_coefficients() -> np.ndarray:
    """Chebyshev coefficients of g on each octave, shape (degree + 1, octaves)."""
    table = []
    for j in range(_OCTAVES):
        low = 2.0**j

        def g_on_octave(x: np.ndarray, low: float = low) -> Any:
            u = low * (x + 3.0) / 2.0
            return np.exp(u) * special.exp1(u)

        table.append(_cheb.chebinterpolate(g_on_octave, _CHEB_DEGREE))
    return np.ascontiguousarray(np.array(table).T)


_OCTAVE_COEFFICIENTS = _octave_coefficients()


def _series_g(u: np.ndarray) -> np.ndarray:
    """e^u E1(u) from the power series, for 0 < u < 1 (A&S 5.1.11)."""
    acc = np.full_like(u, _SERIES[0])
    for c in _SERIES[1:]:
        acc *= u
        acc += c
    return np.exp(u) * (u * acc - np.euler_gamma - np.log(u))


def _octave_g(u: np.ndarray) -> np.ndarray:
    """e^u E1(u) from the per-octave Chebyshev interpolants, for 1 <= u < 8."""
    mantissa, exponent = np.frexp(u)  # u = m 2^e, m in [0.5, 1), octave e - 1
    coefficients = np.take(_OCTAVE_COEFFICIENTS, (exponent - 1).astype(np.intp), axis=1)
    x2 = 2.0 * (4.0 * mantissa - 3.0)  # 2x, x in [-1, 1) on the octave
    b1 = np.zeros_like(u)
    b2 = np.zeros_like(u)
    for k in range(_CHEB_DEGREE, 0, -1):
        b0 = x2 * b1
        b0 -= b2
        b0 += coefficients[k]
        b2, b1 = b1, b0
    return coefficients[0] + 0.5 * x2 * b1 - b2


def _fraction_g_and_tail(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(e^u E1(u), tail r) from the backward continued fraction, for u >= 8 (A&S 5.1.22)."""
    tail = np.zeros_like(u)
    for k in range(_CF_DEPTH, 0, -1):
        tail = (k * k) / (u + (2 * k + 1) - tail)
    return 1.0 / (u + 1.0 - tail), tail


def _flat(u: ArrayLike) -> tuple[np.ndarray, tuple[int, ...]]:
    arr = np.asarray(u, dtype=float)
    return arr.reshape(-1), arr.shape


def _g_with_large_index(u: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """g on a flat array, plus the indices of u >= 8 and g and r there.

    Index arrays, not boolean masks: fancy indexing with integer indices is several
    times faster than boolean indexing in numpy.
    """
    g = np.full_like(u, np.nan)
    small = np.nonzero((u > 0.0) & (u < 1.0))[0]
    middle = np.nonzero((u >= 1.0) & (u < _CF_THRESHOLD))[0]
    large = np.nonzero(u >= _CF_THRESHOLD)[0]
    if small.size:
        g[small] = _series_g(u[small])
    if middle.size:
        g[middle] = _octave_g(u[middle])
    g_large = r_large = np.empty(0)
    if large.size:
        g_large, r_large = _fraction_g_and_tail(u[large])
        g[large] = g_large
    return g, large, g_large, r_large


def _factors(u: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """g, h, H, F on the same u in one pass."""
    flat, shape = _flat(u)
    g, large, gl, rl = _g_with_large_index(flat)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = 1.0 / flat - g
        H = 1.0 - flat * g
        F = 1.0 - flat * H
    if large.size:
        ul = flat[large]
        one_minus_r = 1.0 - rl
        h[large] = gl * one_minus_r / ul
        H[large] = gl * one_minus_r
        F[large] = gl * (1.0 + rl * (ul - 1.0))
    return tuple(x.reshape(shape)[()] for x in (g, h, H, F))  # type: ignore[return-value]


def scaled_exponential_integral(u: ArrayLike) -> np.ndarray:
    """Scaled exponential integral e^u E1(u) for u > 0, overflow-free (Abramowitz & Stegun 5.1.11, 5.1.22)."""
    flat, shape = _flat(u)
    return _g_with_large_index(flat)[0].reshape(shape)[()]


def gaussian_on_axis_factor(a: ArrayLike) -> np.ndarray:
    """On-axis factor R(a) = (1/2) e^a E1(a), a = (k_p sigma_r)^2/2 (Keinigs & Jones, Phys. Fluids 30, 252 (1987))."""
    return 0.5 * scaled_exponential_integral(a)


def wake_kernel_h(u: ArrayLike) -> np.ndarray:
    """Envelope wake kernel h(u) = 1/u - e^u E1(u) = int_0^inf e^{-ut} t/(1+t) dt (MODEL.md section 10)."""
    return _factors(u)[1]


def envelope_seed_factor(u: ArrayLike) -> np.ndarray:
    """Envelope seed factor H(u) = 1 - u e^u E1(u) = u h(u), -> 1 for narrow beams (MODEL.md section 2)."""
    return _factors(u)[2]


def envelope_growth_factor(u: ArrayLike) -> np.ndarray:
    """Envelope growth factor F(u) = 1 - u + u^2 e^u E1(u), -> 1 narrow and 2/u wide (MODEL.md section 2)."""
    return _factors(u)[3]


def slice_form_factors(u: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(e^u E1(u), h(u), H(u), F(u)) in one pass, for callers needing several (MODEL.md sections 2, 10)."""
    return _factors(u)


def _driver_factors_exact(u: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(u R(u/2), H(u), F(u)) from the exact forms above."""
    _, _, seed_factor, growth_factor = _factors(u)
    return u * gaussian_on_axis_factor(0.5 * u), seed_factor, growth_factor


# The driver's three factors as one cubic table in ln u (model.tables): slopes d/d ln u by five-point central
# differences of the exact forms (1e-13), step 0.004, within 1e-12 of the exact forms on 1e-6 <= u <= 1e4.
_DRIVER_TABLE_U = (1e-6, 1e4)
_DRIVER_TABLE_STEP = 0.004
_LN_U0 = math.log(_DRIVER_TABLE_U[0])


def _driver_factor_table() -> np.ndarray:
    ln_u = _LN_U0 + _DRIVER_TABLE_STEP * np.arange(
        math.ceil(math.log(_DRIVER_TABLE_U[1] / _DRIVER_TABLE_U[0]) / _DRIVER_TABLE_STEP) + 1
    )
    values = np.column_stack(_driver_factors_exact(np.exp(ln_u)))
    d = 1e-3
    around = [np.column_stack(_driver_factors_exact(np.exp(ln_u + k * d))) for k in (-2, -1, 1, 2)]
    slopes = (around[0] - 8.0 * around[1] + 8.0 * around[2] - around[3]) / (12.0 * d)
    return hermite_rows(values, slopes, _DRIVER_TABLE_STEP)


_DRIVER_TABLE = _driver_factor_table()


def driver_slice_factors(u: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(k_p sigma_r)^2 R(a), H(u), F(u) at u = (k_p sigma_r)^2, tabulated to 1e-12 of the exact forms (MODEL.md 2)."""
    flat, shape = _flat(u)
    factors = _driver_table_values(_DRIVER_TABLE, flat)
    outside = _outside_driver_table(flat)
    if outside.size:  # beyond the table (or NaN): the exact forms
        for factor, exact in zip(factors, _driver_factors_exact(flat[outside]), strict=True):
            factor[outside] = exact
    return tuple(x.reshape(shape)[()] for x in factors)  # type: ignore[return-value]


def driver_on_axis_factor(u: ArrayLike) -> np.ndarray:
    """(k_p sigma_r)^2 R(a) alone, as driver_slice_factors gives it (the same table rows, the same arithmetic)."""
    flat, shape = _flat(u)
    (on_axis,) = _driver_table_values(_ON_AXIS_TABLE, flat)
    outside = _outside_driver_table(flat)
    if outside.size:
        on_axis[outside] = flat[outside] * gaussian_on_axis_factor(0.5 * flat[outside])
    return on_axis.reshape(shape)[()]


_ON_AXIS_TABLE = np.ascontiguousarray(_DRIVER_TABLE[:, :4])  # the first function's coefficient rows


def _driver_table_values(table: np.ndarray, flat: np.ndarray) -> list[np.ndarray]:
    with np.errstate(invalid="ignore", divide="ignore"):
        return cubic_values(table, (np.log(flat) - _LN_U0) * (1.0 / _DRIVER_TABLE_STEP))


def _outside_driver_table(flat: np.ndarray) -> np.ndarray:
    """Indices of u beyond the table or NaN; two reductions where there is none (NaN fails both)."""
    if flat.size and flat.min() >= _DRIVER_TABLE_U[0] and flat.max() <= _DRIVER_TABLE_U[1]:
        return np.empty(0, dtype=np.intp)
    return np.flatnonzero(~((flat >= _DRIVER_TABLE_U[0]) & (flat <= _DRIVER_TABLE_U[1])))
