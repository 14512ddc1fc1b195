"""Helpers of the planner's service, page, command and browser tests: what the planner evaluates for a
point, and campaign settings that make a base fail one rule by its own numbers (so the tests hold
whatever the model's numbers are). ``relaxed`` and ``failing`` are the model tests' helpers
(tests/model/test_plan.py) as campaign settings."""

from __future__ import annotations

import copy
from collections.abc import Mapping
from typing import Any

from model import DEFAULT_SETTINGS, evaluate_shot
from model.plan import DROPPED_KEYS
from model.rules import RULES, RULES_BY_CODE


def planned(shot: Mapping[str, Any], values: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """What the planner evaluates: the shot without measurements, shot_id and taken_at, some fields replaced."""
    out = {k: copy.deepcopy(v) for k, v in shot.items() if k not in DROPPED_KEYS}
    for path, value in (values or {}).items():
        section, name = path.split(".", 1)
        out.setdefault(section, {})[name] = value
    return out


def relaxed(*keep: str) -> dict[str, Any]:
    """Settings in which only the rules `keep` can fire (every other limit moved out of reach)."""
    limits = {}
    for rule in RULES:
        defaults = DEFAULT_SETTINGS["limits"].get(rule.code)
        if rule.code in keep or defaults is None:
            continue
        far = -1e300 if rule.bad_when == "below" else 1e300
        limits[rule.code] = {name: far for name in defaults}
    return {"limits": limits}


def failing(base: Mapping[str, Any], keep: tuple[str, ...] = (), **fractions: float) -> dict[str, Any]:
    """Settings in which only the rules `keep` and `fractions` can fire; each rule of `fractions` (an "above"
    rule) gets a marginal limit of that fraction of the base's own metric, so the base fails it."""
    settings = relaxed(*keep, *fractions)
    evaluation = evaluate_shot(planned(base))
    for code, fraction in fractions.items():
        settings["limits"][code] = {"marginal": fraction * evaluation[RULES_BY_CODE[code].metric], "outside": 1e300}
    return settings
