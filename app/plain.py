"""Plain values: the one "NaN and infinity become null" rule, for storage, JSON and charts.

Model outputs are float arrays with NaN where a value is absent; the database, JSON
and Plotly want None there. Everything that crosses that line goes through here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from datetime import date, datetime
from typing import Any

import numpy as np


def finite_or_none(value: Any) -> float | None:
    """A finite float, or None for None, NaN and infinity."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def float_list(values: Any) -> list[float | None]:
    """A float column as a list, None where it is NaN or infinite (fast for whole columns)."""
    array = np.asarray(values, dtype=float)
    out: list[float | None] = array.tolist()
    for i in np.flatnonzero(~np.isfinite(array)).tolist():
        out[i] = None
    return out


def rounded(value: Any, digits: int = 6) -> float | None:
    """A number to ``digits`` significant digits for a chart payload; None where not finite."""
    value = finite_or_none(value)
    return None if value is None else float(f"{value:.{digits}g}")


def rounded_list(values: Any, digits: int = 6) -> list[Any]:
    """``rounded`` over a list or array (nested lists of a 2-D array stay nested)."""
    array = np.asarray(values if values is not None else [], dtype=float)
    if array.ndim > 1:
        return [rounded_list(row, digits) for row in array]
    spec = f".{digits}g"  # rounded of each value, inlined: charts round tens of thousands at a time
    return [float(format(v, spec)) if v - v == 0 else None for v in array.tolist()]  # v - v: NaN for NaN, inf


def plain(value: Any) -> Any:
    """JSON-ready: numpy scalars and arrays to Python, NaN and infinity to None, dates to ISO text."""
    if isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, Mapping):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, (datetime, date)):
        return value.isoformat()
    if isinstance(value, np.generic | np.ndarray):
        return plain(value.tolist())
    if hasattr(value, "__dataclass_fields__"):
        return plain({k: getattr(value, k) for k in value.__dataclass_fields__})
    return value
