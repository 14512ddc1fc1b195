"""Shot bodies before storing: validation, the payload digest and differences.

``prepare_all`` checks every body of a request (the envelope with pydantic, the physics
inputs with the model's table validator) and names every failing field; the valid
shots come out as ``PreparedShot`` rows and their model inputs as validated dotted-path
columns (``PreparedBatch.inputs``), which stay columns until the store boundary.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from pydantic import TypeAdapter, ValidationError

import model
from app.errors import FieldProblem, InvalidInput
from app.schemas import ShotEnvelope, pydantic_problems
from app.services import metrics
from app.times import format_utc

_ENVELOPE = TypeAdapter(ShotEnvelope)
_FLOAT_MAX = 1.7976931348623157e308
_NUMBER_OR_ABSENT = (int, float, type(None))
_CHECK_CHUNK = 64  # rows per vectorised check; a failing chunk is re-checked shot by shot


# --- inputs as columns ----------------------------------------------------------------------------


def _object_array(values: list[Any]) -> np.ndarray:
    out = np.empty(len(values), dtype=object)
    out[:] = values
    return out


def payload_columns(payloads: Sequence[Mapping[str, Any]]) -> dict[str, np.ndarray]:
    """Dotted-path columns of the known inputs, None (or NaN) where absent.

    Numeric columns holding only numbers are float arrays, which the model checks much
    faster than object arrays; anything else stays as posted for the model to refuse.
    """
    blocks = {sec: [p.get(sec) or {} for p in payloads] for sec in model.SECTIONS}
    columns: dict[str, np.ndarray] = {}
    for f in model.INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        values = [b.get(name) for b in blocks[section]]
        if f.kind != "enum" and all(type(v) in _NUMBER_OR_ABSENT for v in values):
            columns[f.path] = np.array(values, dtype=float)
        else:
            columns[f.path] = _object_array(values)
    return columns


def _unrepresentable_inputs(payload: Mapping[str, Any]) -> list[FieldProblem]:
    """Input fields holding an integer too large for a float (JSON allows any size)."""
    problems = []
    for f in model.INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        block = payload.get(section)
        value = block.get(name) if isinstance(block, Mapping) else None
        if type(value) is int and abs(value) > _FLOAT_MAX:
            problems.append((f.path, "out of range (too large for a floating-point number)"))
    return problems


def needs_single_check(payload: Mapping[str, Any]) -> bool:
    """Shots whose problems only the per-shot check sees: a section that is not an
    object, or seed fields without a seed method."""
    for section in model.SECTIONS:
        block = payload.get(section)
        if block is not None and not isinstance(block, Mapping):
            return True
    seed = payload.get("seed")
    return isinstance(seed, Mapping) and seed.get("method") is None and any(v is not None for v in seed.values())


# --- identity of a payload: digest and differences -------------------------------------------------


def comparable_payload(payload: Mapping[str, Any], taken_at: datetime) -> dict[str, Any]:
    """The payload as compared for replays: taken_at as the UTC instant, in any offset written."""
    return {**payload, "taken_at": format_utc(taken_at)}


def stored_comparable(payload: Mapping[str, Any]) -> dict[str, Any]:
    """``comparable_payload`` of a stored (valid) payload."""
    return comparable_payload(payload, _ENVELOPE.validate_python(payload).taken_at)


def payload_digest(comparable: Mapping[str, Any]) -> str:
    """sha256 of the sorted JSON; raises ValueError for NaN or infinity anywhere."""
    text = json.dumps(comparable, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def differing_paths(old: Any, new: Any, prefix: str = "") -> list[str]:
    """Dotted paths of every leaf that differs between two JSON documents.

    Numbers compare by value (250 == 250.0), so a digest mismatch with no differing
    path is still the same shot.
    """
    if isinstance(old, Mapping) and isinstance(new, Mapping):
        out: list[str] = []
        for key in list(old) + [k for k in new if k not in old]:
            path = f"{prefix}.{key}" if prefix else str(key)
            if key not in old or key not in new:
                out.append(path)
            else:
                out += differing_paths(old[key], new[key], path)
        return out
    if isinstance(old, list) and isinstance(new, list) and len(old) == len(new):
        out = []
        for i, (a, b) in enumerate(zip(old, new, strict=True)):
            out += differing_paths(a, b, f"{prefix}.{i}" if prefix else str(i))
        return out
    if isinstance(old, bool) or isinstance(new, bool):
        same = old is new
    else:
        same = (type(old) in (int, float) and type(new) in (int, float) and old == new) or (
            type(old) is type(new) and old == new
        )
    return [] if same else [prefix or "(document)"]


# --- validation -----------------------------------------------------------------------------------


@dataclass
class PreparedShot:
    """One valid shot body, ready to store."""

    index: int  # position in the request
    payload: dict[str, Any]  # verbatim, as posted
    shot_id: str
    taken_at: datetime  # UTC
    notes: str
    tags: list[str]
    position: int  # row in PreparedBatch.inputs
    comparable: dict[str, Any]
    sha256: str


@dataclass
class PreparedBatch:
    """Valid shots of one request and their validated model inputs (dotted-path columns)."""

    shots: list[PreparedShot]
    inputs: Mapping[str, np.ndarray]  # input path -> values (defaults applied), by position

    def inputs_of(self, shots: Sequence[PreparedShot]) -> dict[str, np.ndarray]:
        positions = np.array([s.position for s in shots], dtype=np.intp)
        return {path: values[positions] for path, values in self.inputs.items()}


def _non_finite_paths(value: Any, prefix: str = "") -> list[FieldProblem]:
    if isinstance(value, float):
        return [] if math.isfinite(value) else [(prefix, "NaN or infinity is not allowed")]
    if isinstance(value, Mapping):
        out: list[FieldProblem] = []
        for k, v in value.items():
            out += _non_finite_paths(v, f"{prefix}.{k}" if prefix else str(k))
        return out
    if isinstance(value, list):
        out = []
        for i, v in enumerate(value):
            out += _non_finite_paths(v, f"{prefix}.{i}" if prefix else str(i))
        return out
    return []


def prefixed(prefix: str, path: str) -> str:
    return f"{prefix}.{path}" if prefix else path


def physics_problems(payload: Mapping[str, Any], prefix: str = "") -> list[FieldProblem]:
    """Non-finite numbers anywhere (unknown fields too), and the section-1 inputs as the model checks them."""
    own = _non_finite_paths(payload) + _unrepresentable_inputs(payload)
    problems = [(prefixed(prefix, p), r) for p, r in own]
    if _unrepresentable_inputs(payload):
        return problems  # the model cannot take such a number at all
    try:
        model.validate_shot(payload)
    except model.ShotInputError as exc:
        seen = {p for p, _ in own}
        problems += [(prefixed(prefix, str(p)), str(r)) for p, r in exc.problems if str(p) not in seen]
    return problems


def check_shot_body(payload: Any) -> None:
    """What-if and simulate: one shot body the model can evaluate, or InvalidInput naming every field."""
    if not isinstance(payload, Mapping):
        raise InvalidInput([("body", "a shot must be a JSON object")])
    problems = physics_problems(payload)
    if problems:
        raise InvalidInput(problems)


def _checked_inputs(
    payloads: Sequence[Mapping[str, Any]], prefixes: Sequence[str], non_finite: Sequence[bool]
) -> tuple[Mapping[str, np.ndarray], list[FieldProblem]]:
    """Validated input columns of every shot, or the problems naming each failing field.

    The vectorised check (model.validate_columns) clears the usual all-valid case in one
    call; when it fails, chunks locate the failing shots, and those (with shots only the
    per-shot check understands) go through model.validate_shot, whose problems carry
    per-shot field paths.
    """
    single = [bad or needs_single_check(p) for p, bad in zip(payloads, non_finite, strict=True)]
    if not any(single):
        try:
            return model.validate_columns(payload_columns(payloads)), []
        except (model.ShotInputError, OverflowError):  # OverflowError: an integer beyond float range
            pass
    suspects = [i for i, flag in enumerate(single) if flag]
    for start in range(0, len(payloads), _CHECK_CHUNK):
        rows = [i for i in range(start, min(start + _CHECK_CHUNK, len(payloads))) if not single[i]]
        if not rows:
            continue
        try:
            model.validate_columns(payload_columns([payloads[i] for i in rows]))
        except (model.ShotInputError, OverflowError):
            suspects += rows
    problems: list[FieldProblem] = []
    for i in sorted(suspects):
        problems += physics_problems(payloads[i], prefixes[i])
    if problems:
        return {}, problems
    # Every suspect passed on its own: check the whole set (a ShotInputError here still 422s).
    return model.validate_columns(payload_columns(payloads)), []


def _reject(count: int, problems: list[FieldProblem], batch: bool) -> InvalidInput:
    metrics.SHOTS_REJECTED.inc(count, reason="invalid")
    failing = {p.split(".", 2)[1] for p, _ in problems if p.startswith("shots.")}
    if batch:
        detail = f"{len(failing) or count} of {count} shots are invalid; nothing was stored"
    else:
        detail = f"the shot is invalid ({len(problems)} problem(s)); nothing was stored"
    return InvalidInput(problems, detail)


def prepare_all(payloads: Sequence[Any], batch: bool) -> PreparedBatch:
    """Validate every body; InvalidInput naming every failing field (``shots.<i>.<path>`` in a batch)."""
    problems: list[FieldProblem] = []
    valid: dict[int, tuple[ShotEnvelope, dict[str, Any], str]] = {}
    objects: list[int] = []
    non_finite: list[bool] = []
    for i, payload in enumerate(payloads):
        prefix = f"shots.{i}" if batch else ""
        if not isinstance(payload, Mapping):
            problems.append((prefix or "body", "a shot must be a JSON object"))
            continue
        objects.append(i)
        envelope = None
        try:
            envelope = _ENVELOPE.validate_python(payload)
        except ValidationError as exc:
            problems += pydantic_problems(exc.errors(include_url=False), prefix)
        comparable = comparable_payload(payload, envelope.taken_at) if envelope else dict(payload)
        try:
            digest = payload_digest(comparable)
        except ValueError:  # NaN or infinity somewhere; physics_problems names where
            non_finite.append(True)
            continue
        non_finite.append(False)
        if envelope is not None:
            valid[i] = (envelope, comparable, digest)
    inputs, physics = _checked_inputs(
        [payloads[i] for i in objects], [f"shots.{i}" if batch else "" for i in objects], non_finite
    )
    problems += physics
    if problems:
        if batch:  # in request order
            problems.sort(key=lambda p: int(p[0].split(".", 2)[1]) if p[0].startswith("shots.") else -1)
        raise _reject(len(payloads), problems, batch)
    prepared: list[PreparedShot] = []
    for position, i in enumerate(objects):
        envelope, comparable, digest = valid[i]
        prepared.append(
            PreparedShot(
                index=i,
                payload=payloads[i],
                shot_id=envelope.shot_id,
                taken_at=envelope.taken_at.astimezone(UTC),
                notes=envelope.notes,
                tags=list(envelope.tags),
                position=position,
                comparable=comparable,
                sha256=digest,
            )
        )
    return PreparedBatch(prepared, inputs)
