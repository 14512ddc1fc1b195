"""The advisory caution every page, export, generated file and command carries.

Defined once here; Python code imports ``ADVISORY_CAUTION`` and every template reads the
``caution`` global of the one Jinja environment (``app.presentation.templates``).
"""

from __future__ import annotations

ADVISORY_CAUTION = (
    "wakeledger is advisory: it does not replace machine protection, interlocks, radiation "
    "safety or the facility's own procedures. Local rules and licensed operators decide."
)
