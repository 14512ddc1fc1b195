"""JSON for pages and feeds: compact, strict (NaN becomes null) and safe inside HTML; bytes for large answers."""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

import numpy as np
import orjson
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


def json_bytes(value: Any) -> bytes:
    """Compact JSON bytes for large numeric answers (plans): numpy arrays written natively, NaN and
    infinity as null (orjson's own rule, the same as ``app.plain``), anything else through ``plain``."""
    return orjson.dumps(value, option=orjson.OPT_SERIALIZE_NUMPY, default=plain)


def coded_array_json(codes: np.ndarray, texts: Sequence[str | None]) -> bytes:
    """The JSON array of ``texts[code]`` for each code (small non-negative integers, e.g. status ranks).

    Equal codes in a row are written as one repeated token: a scan's regions cost a few joins instead
    of one Python object per point; codes that change at more than one point in eight are written as
    a list (the same bytes)."""
    codes = np.asarray(codes).reshape(-1)
    if codes.size == 0:
        return b"[]"
    starts = np.flatnonzero(codes[1:] != codes[:-1]) + 1
    if starts.size > codes.size // 8:
        return orjson.dumps(np.array(texts, dtype=object)[codes].tolist())
    tokens = [orjson.dumps(text) + b"," for text in texts]
    bounds = [0, *starts.tolist(), codes.size]
    firsts, ends = bounds[:-1], bounds[1:]
    runs = [tokens[c] * (end - first) for c, first, end in zip(codes[firsts].tolist(), firsts, ends, strict=True)]
    return b"[" + b"".join(runs)[:-1] + b"]"
