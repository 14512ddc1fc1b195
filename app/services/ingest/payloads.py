"""Shot bodies before storing: validation, the service's field policy, the payload digest
and differences.

``prepare_all`` checks every body of a request (the envelope with pydantic, the physics
inputs with the model's table validator, the field policy below) and names the failing
fields, the first ``MAX_PROBLEMS`` of them (a payload is not walked further once the cap
is reached; every invalid shot is still counted). The valid shots come out as
``PreparedShot`` rows and their model inputs as validated dotted-path columns
(``PreparedBatch.inputs``), which stay columns until the store boundary.

The field policy is the service's, stricter than the model (which keeps unknown fields):
inside ``driver``, ``plasma``, ``seed`` and ``measured`` only the fields of
``model.INPUT_FIELDS`` are taken (a typo would otherwise leave the real field at its
default), each unknown key named with a "did you mean" suggestion; other top-level
sections (e.g. ``daq``) are kept verbatim. ``taken_at`` must lie between 1990 and a
little past the server's clock. The fields that took their defaults are listed.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import orjson
from pydantic import AwareDatetime, TypeAdapter, ValidationError

import model
from app.errors import FieldProblem, InvalidInput, ProblemList
from app.schemas import ShotEnvelope, pydantic_problems
from app.services import metrics
from app.times import EARLIEST_SHOT_TIME, format_utc

_ENVELOPE = TypeAdapter(ShotEnvelope)
_STORED_TIME = TypeAdapter(AwareDatetime)  # stored payloads were checked when they came in
DEFAULT_MAX_FUTURE = timedelta(days=1)
# Known keys of each physics section, from the model's field table.
KNOWN_FIELDS: dict[str, tuple[str, ...]] = {
    section: tuple(f.path.split(".", 1)[1] for f in model.INPUT_FIELDS if f.path.startswith(section + "."))
    for section in model.SECTIONS
}
_KNOWN_KEYS = {section: frozenset(names) for section, names in KNOWN_FIELDS.items()}
_DEFAULTED = tuple(f for f in model.INPUT_FIELDS if f.default is not None)
_FLOAT_MAX = 1.7976931348623157e308
_NUMBER_OR_ABSENT = frozenset({int, float, type(None)})
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
        if f.kind != "enum" and set(map(type, values)) <= _NUMBER_OR_ABSENT:
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
        if block is not None and type(block) is not dict and not isinstance(block, Mapping):
            return True
    seed = payload.get("seed")
    return isinstance(seed, Mapping) and seed.get("method") is None and any(v is not None for v in seed.values())


# --- identity of a payload: digest and differences -------------------------------------------------


def comparable_payload(payload: Mapping[str, Any], taken_at: datetime) -> dict[str, Any]:
    """The payload as compared for replays: taken_at as the UTC instant, in any offset written
    (the payload itself, not a copy, when it writes taken_at so already: the usual shot)."""
    utc = format_utc(taken_at)
    if type(payload) is dict and payload.get("taken_at") == utc:
        return payload
    return {**payload, "taken_at": utc}


def stored_comparable(payload: Mapping[str, Any]) -> dict[str, Any]:
    """``comparable_payload`` of a stored (valid) payload."""
    return comparable_payload(payload, _STORED_TIME.validate_python(payload["taken_at"]))


def canonical_json(value: Any) -> str:
    """The one JSON text of a payload: sorted keys, compact, UTF-8 (orjson; the standard encoder for
    what orjson refuses, integers beyond 64 bits). Raises ValueError for NaN or infinity anywhere.

    It is hashed for the digest and stored as it is in both raw_payload columns.
    """
    return canonical_bytes(value).decode("utf-8")


def canonical_bytes(value: Any) -> bytes:
    """``canonical_json`` as UTF-8 bytes, the form hashed for the digest."""
    try:
        data = orjson.dumps(value, option=orjson.OPT_SORT_KEYS)
    except TypeError:
        text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
        return text.encode("utf-8")
    # orjson writes NaN and infinity as null: where a null shows, look for them.
    if b"null" in data and _has_non_finite(value):
        raise ValueError("NaN or infinity is not allowed")
    return data


def _has_non_finite(value: Any) -> bool:
    if isinstance(value, float):
        return not math.isfinite(value)
    if isinstance(value, Mapping):
        return any(_has_non_finite(v) for v in value.values())
    if isinstance(value, list):
        return any(_has_non_finite(v) for v in value)
    return False


def text_digest(text: str) -> str:
    return bytes_digest(text.encode("utf-8"))


def bytes_digest(data: bytes) -> str:
    """The digest of a canonical JSON text given as its UTF-8 bytes: sha256, hex."""
    return hashlib.sha256(data).hexdigest()


def payload_digest(comparable: Mapping[str, Any]) -> str:
    """sha256 of the canonical JSON; raises ValueError for NaN or infinity anywhere."""
    return text_digest(canonical_json(comparable))


def legacy_payload_digest(comparable: Mapping[str, Any]) -> str:
    """The digest of shots stored before the canonical JSON was orjson's (the standard encoder's text,
    which writes some floats differently: 1.5e-07 for 1.5e-7). A re-post of such a shot compares equal to it."""
    text = json.dumps(comparable, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return text_digest(text)


def same_digest(stored: str, shot: PreparedShot) -> bool:
    """Whether a stored digest is this shot's, in today's format or the earlier one."""
    return stored == shot.sha256 or stored == legacy_payload_digest(shot.comparable)


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


# --- the field policy -------------------------------------------------------------------------------


def unknown_field_problems(payload: Mapping[str, Any], prefix: str = "") -> list[FieldProblem]:
    """Keys inside a physics section that the model does not know, each with the closest known name."""
    problems: list[FieldProblem] = []
    for section, known in KNOWN_FIELDS.items():
        block = payload.get(section)
        if block is None or (type(block) is not dict and not isinstance(block, Mapping)):
            continue
        if block.keys() <= _KNOWN_KEYS[section]:
            continue  # the usual section: every key known
        for key in block:
            if key in known:
                continue
            reason = f"unknown field of {section}"
            close = difflib.get_close_matches(str(key), known, n=1, cutoff=0.6)
            if close:
                reason += f"; did you mean {section}.{close[0]}?"
            problems.append((prefixed(prefix, f"{section}.{key}"), reason))
    return problems


def defaulted_fields(payload: Mapping[str, Any]) -> list[str]:
    """Input fields with a default that the shot leaves out (or sets to null)."""
    out = []
    for f in _DEFAULTED:
        section, name = f.path.split(".", 1)
        block = payload.get(section)
        if not isinstance(block, Mapping) or block.get(name) is None:
            out.append(f.path)
    return out


def defaulted_by_shot(payloads: Sequence[Mapping[str, Any]]) -> list[list[str]]:
    """``defaulted_fields`` of valid payloads (every physics section an object or absent), field by field."""
    out: list[list[str]] = [[] for _ in payloads]
    blocks: dict[str, list[Any]] = {}
    for f in _DEFAULTED:
        section, name = f.path.split(".", 1)
        if section not in blocks:
            blocks[section] = [p.get(section) or {} for p in payloads]
        for i, block in enumerate(blocks[section]):
            if block.get(name) is None:
                out[i].append(f.path)
    return out


def taken_at_problems(taken_at: datetime, now: datetime, max_future: timedelta, prefix: str = "") -> list[FieldProblem]:
    """A shot time before 1990 or more than ``max_future`` past the server's clock is a mistake."""
    path = prefixed(prefix, "taken_at")
    if taken_at < EARLIEST_SHOT_TIME:
        return [(path, f"is before {format_utc(EARLIEST_SHOT_TIME)}, earlier than any shot this service takes")]
    if taken_at > now + max_future:
        hours = max_future.total_seconds() / 3600
        return [(path, f"is more than {hours:g} h ahead of the server's clock ({format_utc(now)})")]
    return []


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
    defaulted: list[str] = field(default_factory=list)  # input paths that took their defaults
    text: str = ""  # the payload's canonical JSON (canonical_json), stored as it is


@dataclass
class PreparedBatch:
    """Valid shots of one request and their validated model inputs (dotted-path columns)."""

    shots: list[PreparedShot]
    inputs: Mapping[str, np.ndarray]  # input path -> values (defaults applied), by position

    def inputs_of(self, shots: Sequence[PreparedShot]) -> Mapping[str, np.ndarray]:
        """The validated inputs of some shots (still validated: the model does not check them again)."""
        positions = np.array([s.position for s in shots], dtype=np.intp)
        if isinstance(self.inputs, model.ValidatedColumns):
            if positions.size == self.inputs.rows and np.array_equal(positions, np.arange(positions.size)):
                return self.inputs
            return self.inputs.take(positions)
        return {path: values[positions] for path, values in self.inputs.items()}


def _non_finite_paths(value: Any, prefix: str, out: ProblemList) -> None:
    """NaN and infinity anywhere in the value; the walk stops once ``out`` is full."""
    if isinstance(value, float):
        if not math.isfinite(value):
            out.add(prefix, "NaN or infinity is not allowed")
    elif isinstance(value, Mapping):
        for k, v in value.items():
            if out.full:
                return
            _non_finite_paths(v, f"{prefix}.{k}" if prefix else str(k), out)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            if out.full:
                return
            _non_finite_paths(v, f"{prefix}.{i}" if prefix else str(i), out)


def prefixed(prefix: str, path: str) -> str:
    return f"{prefix}.{path}" if prefix else path


def _physics(payload: Mapping[str, Any], prefix: str, out: ProblemList, non_finite: bool) -> None:
    """Add the shot's non-finite numbers and its section-1 inputs as the model checks them.

    Past the cap the payload is not walked: a shot known to hold a non-finite number
    counts once, and the model's check is skipped for a shot already found invalid.
    """
    start = out.total
    if out.full and non_finite:
        out.add(prefix or "body", "NaN or infinity is not allowed")
        return
    own = ProblemList(max(1, out.limit - len(out.items)))
    _non_finite_paths(payload, prefix, own)
    unrepresentable = _unrepresentable_inputs(payload)
    own.extend([(prefixed(prefix, p), r) for p, r in unrepresentable])
    out.extend(own.items)
    out.total += own.total - len(own.items)
    if unrepresentable or (out.full and out.total > start):
        return  # the model cannot take such a number at all / the cap is reached
    try:
        model.validate_shot(payload)
    except model.ShotInputError as exc:
        seen = {p for p, _ in own.items}
        out.extend(
            [(prefixed(prefix, str(p)), str(r)) for p, r in exc.problems if prefixed(prefix, str(p)) not in seen]
        )


def physics_problems(payload: Mapping[str, Any], prefix: str = "") -> list[FieldProblem]:
    """Unknown section fields, non-finite numbers anywhere, and the section-1 inputs as the model checks them."""
    out = ProblemList()
    out.extend(unknown_field_problems(payload, prefix))
    _physics(payload, prefix, out, non_finite=False)
    return out.items


def check_shot_body(payload: Any) -> None:
    """What-if and simulate: one shot body the model can evaluate, or InvalidInput naming the fields."""
    if not isinstance(payload, Mapping):
        raise InvalidInput([("body", "a shot must be a JSON object")])
    out = ProblemList()
    out.extend(unknown_field_problems(payload))
    _physics(payload, "", out, non_finite=False)
    if out:
        raise InvalidInput(out.items, total=out.total, truncated=out.full)


def _checked_inputs(
    payloads: Sequence[Mapping[str, Any]],
    prefixes: Sequence[str],
    non_finite: Sequence[bool],
    out: ProblemList,
) -> tuple[Mapping[str, np.ndarray], set[int]]:
    """Validated input columns of every shot, or the positions of the failing shots (their
    problems added to ``out``).

    The vectorised check (model.validate_columns) clears the usual all-valid case in one
    call; when it fails, chunks locate the failing shots, and those (with shots only the
    per-shot check understands) go through model.validate_shot, whose problems carry
    per-shot field paths.
    """
    single = [bad or needs_single_check(p) for p, bad in zip(payloads, non_finite, strict=True)]
    if not any(single):
        try:
            return model.validate_columns(payload_columns(payloads)), set()
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
    failing: set[int] = set()
    for i in sorted(suspects):
        before = out.total
        _physics(payloads[i], prefixes[i], out, non_finite[i])
        if out.total > before:
            failing.add(i)
    if failing:
        return {}, failing
    # Every suspect passed on its own: check the whole set (a ShotInputError here still 422s).
    return model.validate_columns(payload_columns(payloads)), set()


def _reject(count: int, failing: int, out: ProblemList, batch: bool) -> InvalidInput:
    metrics.SHOTS_REJECTED.inc(count, reason="invalid")
    listed = "; the first problems are listed" if out.full else ""
    if batch:
        detail = f"{failing} of {count} shots are invalid; nothing was stored{listed}"
    else:
        detail = f"the shot is invalid ({out.total} problem(s)); nothing was stored{listed}"
    problems = out.items
    if batch:  # in request order
        problems = sorted(problems, key=lambda p: int(p[0].split(".", 2)[1]) if p[0].startswith("shots.") else -1)
    return InvalidInput(problems, detail, total=out.total, truncated=out.full)


def prepare_all(
    payloads: Sequence[Any],
    batch: bool,
    *,
    now: datetime | None = None,
    max_future: timedelta = DEFAULT_MAX_FUTURE,
) -> PreparedBatch:
    """Validate every body; InvalidInput naming the failing fields (``shots.<i>.<path>`` in a batch)."""
    now = now or datetime.now(UTC)
    out = ProblemList()
    failing: set[int] = set()
    valid: dict[int, tuple[ShotEnvelope, dict[str, Any], str, str]] = {}
    objects: list[int] = []
    non_finite: list[bool] = []
    for i, payload in enumerate(payloads):
        prefix = f"shots.{i}" if batch else ""
        before = out.total
        if not isinstance(payload, Mapping):
            out.add(prefix or "body", "a shot must be a JSON object")
            failing.add(i)
            continue
        objects.append(i)
        envelope = None
        try:
            envelope = _ENVELOPE.validate_python(payload)
        except ValidationError as exc:
            out.extend(pydantic_problems(exc.errors(include_url=False), prefix))
        if envelope is not None:
            timing = taken_at_problems(envelope.taken_at, now, max_future, prefix)
            out.extend(timing)
            envelope = None if timing else envelope
        out.extend(unknown_field_problems(payload, prefix))
        if out.total > before:
            failing.add(i)
        comparable = comparable_payload(payload, envelope.taken_at) if envelope else dict(payload)
        try:
            compared = canonical_bytes(comparable)
            # One text for the digest and the stored payload, unless taken_at was written another way.
            same = comparable is payload or comparable.get("taken_at") == payload.get("taken_at")
            text = compared.decode("utf-8") if same else canonical_json(payload)
        except ValueError:  # NaN or infinity somewhere; _physics names where
            non_finite.append(True)
            continue
        non_finite.append(False)
        if envelope is not None and i not in failing:
            valid[i] = (envelope, comparable, bytes_digest(compared), text)
    inputs, physics_failing = _checked_inputs(
        [payloads[i] for i in objects], [f"shots.{i}" if batch else "" for i in objects], non_finite, out
    )
    failing |= {objects[j] for j in physics_failing}
    if out:
        raise _reject(len(payloads), len(failing), out, batch)
    prepared: list[PreparedShot] = []
    defaulted = defaulted_by_shot([payloads[i] for i in objects])
    for position, i in enumerate(objects):
        envelope, comparable, digest, text = valid[i]
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
                defaulted=defaulted[position],
                text=text,
            )
        )
    return PreparedBatch(prepared, inputs)
