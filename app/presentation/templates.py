"""The one Jinja environment of wakeledger: pages, the weekly report and the detailed-run file.

Autoescaped, strict about undefined names, and with the same filters and globals
everywhere: ``num`` and ``delta`` (``app.presentation.numbers``), ``localtime``
(``app.times.local_text``), ``unit``, ``urlpart``, ``json_for_html``, and the globals
``caution`` (``app.advisory``), ``status_styles``, ``glyphs``, ``palette_css`` and
``asset`` (a static file's URL with its content version).
"""

from __future__ import annotations

import hashlib
from functools import lru_cache
from pathlib import Path
from typing import Any
from urllib.parse import quote

import jinja2

import model
from app.advisory import ADVISORY_CAUTION
from app.presentation.fields import unit_of
from app.presentation.json_text import json_for_html
from app.presentation.numbers import format_delta, format_number
from app.presentation.palette import GLYPHS, STATUS_STYLES, css_variables
from app.times import campaign_zone, local_text

TEMPLATE_DIR = Path(__file__).resolve().parent.parent / "templates"
STATIC_DIR = Path(__file__).resolve().parent.parent / "static"
# Asset URLs served from files outside app/static (e.g. Plotly's), registered by their router.
ASSET_FILES: dict[str, Path] = {}


@lru_cache(maxsize=64)
def _file_version(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:12]


def asset_url(url: str) -> str:
    """``{{ asset("/static/js/wakeledger.js") }}``: the URL with ``?v=`` the file's content
    hash, so browsers may keep it for a year (a changed file is a new URL)."""
    path = ASSET_FILES.get(url) or (STATIC_DIR / url.removeprefix("/static/") if url.startswith("/static/") else None)
    if path is None or not path.is_file():
        return url
    return f"{url}?v={_file_version(path)}"


def _localtime(moment: Any, zone_name: Any = None) -> str:
    """``{{ t|localtime(campaign) }}`` or ``{{ t|localtime("Europe/Zurich") }}``."""
    name = getattr(zone_name, "timezone", zone_name)
    return local_text(moment, campaign_zone(name))


def _num(value: Any, unit_or_digits: Any = "", digits: int = 4) -> str:
    """``{{ x|num }}``, ``{{ x|num("rad") }}`` or ``{{ x|num(6) }}`` (significant digits)."""
    if isinstance(unit_or_digits, int):
        return format_number(value, digits=unit_or_digits)
    return format_number(value, unit_or_digits, digits)


@lru_cache(maxsize=1)
def environment() -> jinja2.Environment:
    """The shared environment (built once; templates are cached by Jinja)."""
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(TEMPLATE_DIR)),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters.update(
        num=_num,
        delta=format_delta,
        localtime=_localtime,
        unit=unit_of,
        urlpart=lambda v: quote(str(v), safe=""),
        json_for_html=json_for_html,
    )
    env.globals.update(
        root="",  # the path prefix (WAKELEDGER_ROOT_PATH); pages set it per request
        caution=ADVISORY_CAUTION,
        statuses=model.STATUSES,
        status_styles=STATUS_STYLES,
        glyphs=GLYPHS,
        palette_css=css_variables(),
        asset=asset_url,
    )
    return env


def render(name: str, **context: Any) -> str:
    return environment().get_template(name).render(**context)
