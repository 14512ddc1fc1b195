"""The planner's questions and answers: a base resolved to a shot and its settings, model.plan asked,
the answer in the API's JSON shape.

A base is a shot in the API JSON shape, or a stored shot ``{"campaign": SLUG, "shot_id": ID}`` (an
object with none of the sections driver, plasma and seed): the payload of its current revision. The
settings are the campaign's when one is named (in the reference, or by the request's top-level
``campaign``), else ``model.DEFAULT_SETTINGS``. The model drops the base's ``measured`` section,
``shot_id`` and ``taken_at`` (a plan is about conditions, not measurements).

Every answer carries ``base`` (the campaign whose settings were used, and the stored shot id and
revision, null for a shot given inline), ``model_version`` and ``settings_version`` (null for the
defaults). Statuses and severities are text here (model ranks inside); arrays stay numpy until
``app.presentation.json_text.json_bytes`` writes them, NaN as null. ``model.PlanInputError``
becomes ``InvalidInput`` with the model's (path, reason) problems: ``base.plasma.density_cm3``,
``axes.0.start``, ``outputs.2``, ``fields.0``, ``vary.1``.
"""

from __future__ import annotations

import base64
import re
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from sqlalchemy.orm import Session

import model
from app.errors import FieldProblem, InvalidInput, NotFound
from app.plain import finite_or_none
from app.presentation.json_text import coded_array_json, json_bytes
from app.schemas import SHOT_ID_PATTERN, SLUG_PATTERN
from app.services.campaigns import effective_settings, require_campaign
from app.services.shots import evaluation_answer
from app.store import shots as shot_store
from model import plan

REFERENCE_KEYS = ("campaign", "shot_id")
_PHYSICS_SECTIONS = tuple(s for s in model.SECTIONS if s != "measured")
_STATUS_TEXT = np.array(model.STATUSES, dtype=object)
_SEVERITY_NAMES = tuple(s or None for s in model.SEVERITY_BY_RANK)  # rank 0: the rule did not fire
_SEVERITY_TEXT = np.array(_SEVERITY_NAMES, dtype=object)
_SEVERITY_BITS = (len(model.SEVERITY_BY_RANK) - 1).bit_length()  # bits of one severity rank in a flag-set key


@dataclass(frozen=True)
class ResolvedBase:
    """The base of a plan: the shot (API JSON shape) and the settings that apply, with where they came from."""

    shot: dict[str, Any]
    settings: dict[str, Any] | None  # None: model.DEFAULT_SETTINGS
    campaign: str | None
    settings_version: int | None
    shot_id: str | None = None  # a stored shot's id and revision; None for a shot given inline
    revision: int | None = None

    def provenance(self) -> dict[str, Any]:
        return {
            "base": {"campaign": self.campaign, "shot_id": self.shot_id, "revision": self.revision},
            "model_version": model.MODEL_VERSION,
            "settings_version": self.settings_version,
        }


def is_reference(base: Any) -> bool:
    """A stored-shot reference: an object with none of the sections driver, plasma and seed."""
    return isinstance(base, Mapping) and not any(section in base for section in _PHYSICS_SECTIONS)


def needs_database(base: Any, campaign: str | None) -> bool:
    """Whether resolving this base reads the database (a stored shot, or a campaign's settings)."""
    return campaign is not None or is_reference(base)


def _reference_problems(base: Mapping[str, Any], campaign: str | None) -> list[FieldProblem]:
    problems: list[FieldProblem] = [
        (f"base.{key}", "a stored shot is named by campaign and shot_id alone")
        for key in base
        if key not in REFERENCE_KEYS
    ]
    shot_id = base.get("shot_id")
    if shot_id is None:
        problems.append(
            (
                "base.shot_id",
                "missing: the base is a shot in the API JSON shape (driver, plasma, seed) "
                "or a stored shot {campaign, shot_id}",
            )
        )
    elif not isinstance(shot_id, str) or not re.fullmatch(SHOT_ID_PATTERN, shot_id):
        problems.append(("base.shot_id", f"not a shot id: {shot_id!r}"))
    named = base.get("campaign")
    if named is None and campaign is None:
        problems.append(("base.campaign", "missing: name the stored shot's campaign here or as the request's campaign"))
    elif named is not None and (not isinstance(named, str) or not re.fullmatch(SLUG_PATTERN, named)):
        problems.append(("base.campaign", f"not a campaign slug: {named!r}"))
    elif named is not None and campaign is not None and named != campaign:
        problems.append(("campaign", f"names campaign {campaign!r}, but base.campaign names {named!r}"))
    return problems


def given_base(shot: Mapping[str, Any]) -> ResolvedBase:
    """A shot given inline, planned with the default settings (no database needed)."""
    return ResolvedBase(dict(shot), None, None, None)


def resolve_base(session: Session, base: Any, campaign: str | None = None) -> ResolvedBase:
    """The shot and settings of a plan request's base (NotFound for an unknown campaign or shot)."""
    if not isinstance(base, Mapping):
        raise InvalidInput([("base", "must be an object: a shot in the API JSON shape or a stored shot reference")])
    if not is_reference(base):
        if campaign is None:
            return given_base(base)
        named = require_campaign(session, campaign)
        return ResolvedBase(dict(base), effective_settings(named), named.slug, named.settings_version)
    problems = _reference_problems(base, campaign)
    if problems:
        raise InvalidInput(problems)
    slug = base.get("campaign") or campaign
    assert slug is not None
    named = require_campaign(session, slug)
    stored = shot_store.get_shot(session, named.id, base["shot_id"])
    if stored is None:
        raise NotFound(f"shot {base['shot_id']!r} in campaign {slug!r}")
    return ResolvedBase(
        dict(stored.raw_payload),
        effective_settings(named),
        named.slug,
        named.settings_version,
        stored.shot_id,
        stored.revision,
    )


@contextmanager
def _plan_problems() -> Iterator[None]:
    """The model's refusal of a plan request as InvalidInput naming each failing field."""
    try:
        yield
    except model.PlanInputError as err:
        raise InvalidInput(err.problems) from None


# ---------------------------------------------------------------------------------------------- scan


def scan(base: ResolvedBase, axes: Any, outputs: Sequence[str] | None = None) -> plan.Scan:
    """model.plan.scan of the base over one or two axes (outputs: the ones asked for, default all)."""
    with _plan_problems():
        return plan.scan(base.shot, axes, base.settings, outputs)


def severity_text(ranks: np.ndarray) -> list[str | None]:
    """Severity ranks as text, None where the rule did not fire."""
    return _SEVERITY_TEXT[ranks].tolist()


def status_text(ranks: np.ndarray) -> list[str]:
    return _STATUS_TEXT[ranks].tolist()


def fired_flag_sets(flags: Mapping[str, np.ndarray]) -> tuple[np.ndarray, list[tuple[tuple[str, str], ...]]]:
    """(index per point, the distinct sets of fired (code, severity) pairs): a scan has few distinct sets,
    so their text is built once per set, not once per point."""
    codes = list(flags)
    n = next(iter(flags.values())).size if flags else 0
    key = np.zeros(n, dtype=np.int64)
    for k, code in enumerate(codes):
        key |= flags[code].astype(np.int64) << (_SEVERITY_BITS * k)
    distinct, index = np.unique(key, return_inverse=True)
    mask = (1 << _SEVERITY_BITS) - 1
    sets = []
    for d in distinct.tolist():
        ranks = [(d >> (_SEVERITY_BITS * k)) & mask for k in range(len(codes))]
        sets.append(tuple((code, model.SEVERITY_BY_RANK[r]) for code, r in zip(codes, ranks, strict=True) if r))
    return index.reshape(-1), sets


OutputEncoding = Literal["json", "float64_base64"]


def scan_answer(base: ResolvedBase, result: plan.Scan, output_encoding: OutputEncoding = "json") -> Iterator[bytes]:
    """``POST /plans/scan``'s JSON in pieces, flat row-major arrays (the first axis varies slowest).

    One piece per output, written by orjson straight from its float64 array (NaN as null), one per
    rule; statuses and severities written from their ranks (``coded_array_json``). Joined, the pieces
    are ``json_bytes`` of the answer as a plain dict, byte for byte. ``output_encoding`` "float64_base64"
    (asked for, never the default): each output is instead the base64 text of its little-endian float64
    values (NaN where the model has none), a third of the time to write and half the bytes, and the
    answer says so (``"output_encoding"``)."""
    axes = [{"field": a.field, "unit": a.unit, "values": a.values} for a in result.axes]
    yield (
        b'{"axes":'
        + json_bytes(axes)
        + b',"shape":'
        + json_bytes(list(result.shape))
        + b',"status":'
        + coded_array_json(result.status, model.STATUSES)
        + b',"outputs":{'
    )
    for i, (name, values) in enumerate(result.outputs.items()):
        yield (b"," if i else b"") + json_bytes(name) + b":"  # apart: joining would copy the array's text
        if output_encoding == "json":
            yield json_bytes(values)
        else:
            yield b'"' + base64.b64encode(np.ascontiguousarray(values, dtype="<f8").tobytes()) + b'"'
    yield b'},"flags":{'
    for i, (code, ranks) in enumerate(result.flags.items()):
        yield (b"," if i else b"") + json_bytes(code) + b":"
        yield coded_array_json(ranks, _SEVERITY_NAMES)
    encoding = b"" if output_encoding == "json" else b'"output_encoding":' + json_bytes(output_encoding) + b","
    yield b"}," + encoding + json_bytes(base.provenance())[1:]


# ---------------------------------------------------------------------------------------------- windows


def windows(base: ResolvedBase, fields: Sequence[str] | None = None) -> plan.Windows:
    with _plan_problems():
        return plan.nominal_windows(base.shot, fields, base.settings)


def _problems_out(problems: Sequence[tuple[str, str]]) -> list[dict[str, str]]:
    return [{"field": path, "reason": reason} for path, reason in problems]


def window_out(w: plan.Window) -> dict[str, Any]:
    return {
        "field": w.field,
        "unit": w.unit,
        "base": w.base,
        "low": w.low,
        "high": w.high,
        "low_rules": list(w.low_rules),
        "high_rules": list(w.high_rules),
        "spacing": w.spacing,
        "span_low": w.span_low,
        "span_high": w.span_high,
        "found": w.found,
        "contains_base": w.contains_base,
        "low_problems": _problems_out(w.low_problems),
        "high_problems": _problems_out(w.high_problems),
    }


def window_answer(base: ResolvedBase, result: plan.Windows) -> dict[str, Any]:
    """``POST /plans/window``: the base's status and each field's nominal window."""
    return {
        "base_status": model.STATUSES[result.base_status],
        "windows": [window_out(w) for w in result.windows],
        **base.provenance(),
    }


# ---------------------------------------------------------------------------------------------- nearest


def nearest(base: ResolvedBase, vary: Sequence[str]) -> plan.Nearest:
    with _plan_problems():
        return plan.nearest_nominal(base.shot, vary, base.settings)


def nearest_answer(base: ResolvedBase, result: plan.Nearest) -> dict[str, Any]:
    """``POST /plans/nearest``: the nominal shot nearest to the base, its evaluation as ``POST /evaluate``
    answers it, and the shot itself (the base with the varied fields replaced, ready to plan from)."""
    if not result.found or result.shot is None or result.status is None:
        return {
            "found": False,
            "distance": None,
            "inputs": {},
            "status": None,
            "evaluation": None,
            "shot": None,
            **base.provenance(),
        }
    return {
        "found": True,
        "distance": result.distance,
        "inputs": dict(result.inputs),
        "status": model.STATUSES[result.status],
        "evaluation": evaluation_answer(result.shot, base.settings, base.settings_version),
        "shot": result.shot,
        **base.provenance(),
    }


# ---------------------------------------------------------------------------------------------- sensitivities


def sensitivities(base: ResolvedBase) -> tuple[plan.SensitivityRow, ...]:
    with _plan_problems():
        return plan.plan_sensitivities(base.shot, base.settings)


def sensitivity_answer(base: ResolvedBase, rows: Sequence[plan.SensitivityRow]) -> dict[str, Any]:
    """``POST /plans/sensitivities``: d ln(output)/d ln(input), largest first; null where there is no derivative."""
    return {
        "rows": [
            {"output": r.output, "field": r.field, "value": finite_or_none(r.value), "one_sided": r.one_sided}
            for r in rows
        ],
        **base.provenance(),
    }


# ---------------------------------------------------------------------------------------------- one point


def point_shot(base: ResolvedBase, values: Mapping[str, Any]) -> dict[str, Any]:
    """The base with some input fields replaced (a point of a scan), without its measurements, shot_id and taken_at."""
    shot = {key: value for key, value in base.shot.items() if key not in plan.DROPPED_KEYS}
    problems: list[FieldProblem] = []
    for path, value in values.items():
        section, _, name = path.partition(".")
        if path not in plan.SCANNABLE_FIELDS:
            problems.append((f"values.{path}", "not a numeric input a plan can vary"))
            continue
        block = shot.get(section)
        shot[section] = {**(block if isinstance(block, Mapping) else {}), name: value}
    if problems:
        raise InvalidInput(problems)
    return shot


def evaluate_point(base: ResolvedBase, values: Mapping[str, Any]) -> dict[str, Any]:
    """The evaluation (``POST /evaluate``'s answer) of the base with these values: a cell of a scan."""
    shot = point_shot(base, values)
    try:
        return evaluation_answer(shot, base.settings, base.settings_version)
    except model.ShotInputError as err:
        raise InvalidInput(
            [(f"values.{path}" if path in values else f"base.{path}", reason) for path, reason in err.problems]
        ) from None
