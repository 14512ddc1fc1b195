"""Uniform cubic Hermite tables: how model/ evaluates a smooth function of one variable fast.

A table is built once, at import, from the function's exact form (values and slopes at the
nodes; the series S(x) in model.growth, the slice form factors in model.form_factors) and
then read for whole arrays at a time: one gather of coefficient rows and an in-place Horner
step per coefficient, instead of dozens of numpy passes per element. The error of a cubic
Hermite interpolant is at most step^4 max|f''''| / 384 (de Boor, A Practical Guide to
Splines, ch. IV, from memory); each table states what it reaches and tests/model checks it.
"""

from __future__ import annotations

import numpy as np


def hermite_rows(values: np.ndarray, slopes: np.ndarray, step: float) -> np.ndarray:
    """Coefficient rows (c0, c1, c2, c3 of t in [0, 1) per function) of a uniform cubic Hermite table, and the end node.

    values and slopes (d/dx) are (nodes,) for one function or (nodes, functions) for several on the same nodes.
    """
    y = values.reshape(values.shape[0], -1)
    d = step * slopes.reshape(slopes.shape[0], -1)
    y0, y1, d0, d1 = y[:-1], y[1:], d[:-1], d[1:]
    per_function = np.stack([y0, d0, 3.0 * (y1 - y0) - 2.0 * d0 - d1, 2.0 * (y0 - y1) + d0 + d1], axis=-1)
    end = np.stack([y[-1], d[-1], np.zeros_like(y[-1]), np.zeros_like(y[-1])], axis=-1)[None]
    return np.ascontiguousarray(np.concatenate([per_function, end]).reshape(y.shape[0], -1))


def cubic_values(rows: np.ndarray, scaled: np.ndarray) -> list[np.ndarray]:
    """Every function of the table at `scaled` = (x - start)/step >= 0 (beyond the end: the end node's line)."""
    j = scaled.astype(np.intp)
    t = scaled - j
    coefficients = rows.take(j, axis=0, mode="clip").T  # rows (4 per function) of strided views
    values = []
    for c0, c1, c2, c3 in coefficients.reshape(rows.shape[1] // 4, 4, scaled.size):
        value = c3 * t  # in-place Horner: few temporaries
        value += c2
        value *= t
        value += c1
        value *= t
        value += c0
        values.append(value)
    return values


def cubic_value_and_slope(rows: np.ndarray, scaled: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(value, d value / d scaled) of a one-function table at `scaled` = (x - start)/step >= 0."""
    j = scaled.astype(np.intp)
    t = scaled - j
    c0, c1, c2, c3 = rows.take(j, axis=0, mode="clip").T
    value = c3 * t
    value += c2
    value *= t
    value += c1
    value *= t
    value += c0
    slope = c3 * (3.0 * t)
    slope += 2.0 * c2
    slope *= t
    slope += c1
    return value, slope
