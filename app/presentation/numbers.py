"""The one number formatter of pages, live rows and reports.

Rule (the live table gets its text from the server, so there is no second copy):
- none, NaN and infinity read ``—`` (an em dash);
- integers as they are, with thousands separators from 10,000 on (``12,345``);
- other numbers to ``digits`` significant digits (4 by default), trailing zeros dropped;
  in scientific notation when the magnitude is at least 1e5 or below 1e-3, written
  ``5.8e+14`` / ``1.235e-4`` (the exponent without leading zeros);
- a unit, when given, follows after a space.
CSV and JSON files never use this: they carry every number unrounded.
"""

from __future__ import annotations

import math
from typing import Any

MISSING = "\u2014"
SCIENTIFIC_FROM = 1e5
SCIENTIFIC_BELOW = 1e-3


def _significant(value: float, digits: int) -> str:
    if value == 0:
        return "0"
    magnitude = abs(value)
    if magnitude >= SCIENTIFIC_FROM or magnitude < SCIENTIFIC_BELOW:
        mantissa, exponent = f"{value:.{digits - 1}e}".split("e")
        if "." in mantissa:
            mantissa = mantissa.rstrip("0").rstrip(".")
        return f"{mantissa}e{int(exponent):+d}"
    places = max(0, digits - 1 - math.floor(math.log10(magnitude)))
    text = f"{round(value, places):.{places}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def format_number(value: Any, unit: str = "", digits: int = 4) -> str:
    """How a number reads on every page, live row and report (see the module rule)."""
    if value is None:
        return MISSING
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, int):
        text = f"{value:,}" if abs(value) >= 10000 else str(value)
    elif isinstance(value, float) or hasattr(value, "__float__"):
        number = float(value)
        if not math.isfinite(number):
            return MISSING
        text = _significant(number, digits)
    else:
        return str(value)
    return f"{text} {unit}" if unit else text


def format_delta(value: Any, unit: str = "") -> str:
    """A change against another week: ``+3``, ``−0.25 rad``, ``±0``; ``—`` for none."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return MISSING
    if value == 0:
        return "\u00b10"
    sign = "+" if value > 0 else "\u2212"
    return sign + format_number(abs(value), unit)
