"""The advisory caution every page, export, generated file and command carries.

Defined once here; Python code imports ``ADVISORY_CAUTION`` and Jinja templates read
the ``caution`` global that ``add_caution_global`` installs.
"""

from __future__ import annotations

from jinja2 import Environment

ADVISORY_CAUTION = (
    "wakeledger is advisory: it does not replace machine protection, interlocks, radiation "
    "safety or the facility's own procedures. Local rules and licensed operators decide."
)


def add_caution_global(env: Environment) -> Environment:
    """Make ``{{ caution }}`` available to every template of the environment."""
    env.globals["caution"] = ADVISORY_CAUTION
    return env
