"""JSON for pages and feeds: compact, strict (NaN becomes null) and safe inside HTML."""

from __future__ import annotations

import json
from typing import Any

from markupsafe import Markup

from app.plain import plain

_HTML_UNSAFE = {ord("<"): "\\u003c", ord(">"): "\\u003e", ord("&"): "\\u0026", 0x2028: "\\u2028", 0x2029: "\\u2029"}


def json_text(value: Any) -> str:
    """Compact JSON; NaN and infinity become null (chart builders already send plain numbers)."""
    try:
        return json.dumps(value, separators=(",", ":"), allow_nan=False, ensure_ascii=False, default=plain)
    except ValueError:  # a NaN somewhere: clean the whole value once
        return json.dumps(plain(value), separators=(",", ":"), allow_nan=False, ensure_ascii=False, default=plain)


def json_for_html(value: Any) -> Markup:
    """JSON safe inside <script type="application/json">: no character can close the element."""
    text = json_text(value)
    for char, escaped in _HTML_UNSAFE.items():
        text = text.replace(chr(char), escaped)
    return Markup(text)
