"""The one export table: stored shots with their evaluation, one row per shot, as every
export writes it (the dashboard's table download, the weekly CSV, JSON and Parquet).

Columns, in order: ``shot_id``, ``taken_at`` (UTC), ``taken_at_local`` (the campaign's
zone, with its offset), ``revision``, ``tags``, ``notes``, every model input under its
column name (``model.column_name``: ``plasma_density_cm3``), ``status``, ``flag_codes``
(``CODE:severity`` entries), ``model_version``, ``settings_version``, every model output
under its name, then the shot's other top-level sections (e.g. ``daq``) under their
dotted paths (``daq.run``), which never collide with ours. Excluded shots are in no
export; the shot table's CSV lists them only when asked (``excluded=include`` or
``only``), and then carries ``excluded_at`` and ``excluded_reason`` after ``flag_codes``. CSV headers carry units by
the one label rule (``plasma_density_cm3 [cm^-3]``; ``app.presentation.csv_writer``
states the rest of the CSV convention); Parquet keeps each unit in the field's metadata
(and ``encoding: json`` there for a section column written as JSON text);
JSON nests the inputs by section, as the API takes them, and keeps other sections verbatim.
An import reads the same table back: the input columns and the other sections are the
shot; everything else is what wakeledger derived.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from functools import cached_property
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
import orjson

import model
from app.plain import float_list
from app.presentation.csv_writer import CsvColumn, joined
from app.presentation.fields import unit_of, with_unit
from app.store.exports import EVALUATION_OUTPUT_COLUMNS, SHOT_INPUT_COLUMNS, FlagColumns, shared
from app.times import format_utc, local_texts, utc_texts

NOT_EVALUATED = "not_evaluated"
ENVELOPE_KEYS = ("shot_id", "taken_at", "notes", "tags")
INPUT_PATHS: tuple[str, ...] = tuple(f.path for f in model.INPUT_FIELDS)
TEXT_INPUTS = frozenset(f.path for f in model.INPUT_FIELDS if f.kind == "enum")
INTEGER_INPUTS = frozenset(f.path for f in model.INPUT_FIELDS if f.kind == "integer")


_READ_KEYS = frozenset((*ENVELOPE_KEYS, *model.SECTIONS))


def other_sections(payload: Mapping[str, Any]) -> dict[str, Any]:
    """The top-level sections of a shot body that wakeledger does not read (kept verbatim)."""
    return {k: v for k, v in payload.items() if k not in _READ_KEYS}


def flat_sections(sections: Mapping[str, Any]) -> dict[str, Any]:
    """Other sections as dotted-path cells, one level deep: {"daq": {"run": 7}} -> {"daq.run": 7}."""
    out: dict[str, Any] = {}
    for key, value in sections.items():
        if isinstance(value, dict):  # sections come from JSON: a mapping is a dict
            for sub, cell in value.items():
                out[f"{key}.{sub}"] = cell
        else:
            out[key] = value
    return out


def extra_paths(payloads: Iterable[Mapping[str, Any]]) -> list[str]:
    """Every dotted path of the other sections the payloads carry, first seen first."""
    seen: dict[str, None] = {}
    for payload in payloads:
        seen.update(dict.fromkeys(flat_sections(other_sections(payload))))
    return list(seen)


@dataclass(frozen=True)
class ShotFlags:
    """The flags of a table's shots column-wise (``app.store.exports.FlagColumns``), in the
    table's row order and rule order within a shot: shot ``i`` has flags ``start[i]:start[i + 1]``."""

    start: np.ndarray  # (shots + 1,) int64
    columns: FlagColumns

    @classmethod
    def of_shots(cls, shot_pk: np.ndarray, flags: FlagColumns) -> ShotFlags:
        """``flags`` grouped by the position of their shot in ``shot_pk`` (flags of other shots left out)."""
        n = len(shot_pk)
        by_pk = np.argsort(shot_pk, kind="stable")
        at = np.searchsorted(shot_pk[by_pk], flags.shot_pk).clip(0, max(n - 1, 0))
        row = by_pk[at] if n else at
        known = shot_pk[row] == flags.shot_pk if n else np.zeros(len(flags), dtype=bool)
        order = np.flatnonzero(known)
        if order.size < len(flags) or np.any(np.diff(row[order]) < 0):
            order = order[np.argsort(row[order], kind="stable")]  # shots not read in key order
            flags = flags.taken(order)
            row = row[order]
        start = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(row, minlength=n), out=start[1:])
        return cls(start, flags)

    def __len__(self) -> int:
        return len(self.start) - 1

    def row_of_flag(self) -> np.ndarray:
        """The table row of every flag."""
        return np.repeat(np.arange(len(self)), np.diff(self.start))

    def per_shot(self, cells: Sequence[Any]) -> list[list[Any]]:
        """One value per flag (in flag order) as one list per shot."""
        bounds = self.start.tolist()
        return [list(cells[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]

    def code_texts(self) -> list[str]:
        """Each shot's flags as one CSV cell: ``WEAK_SEED:marginal;HOSING_RISK:outside``."""
        pairs = [f"{code}:{severity}" for code, severity in zip(self.columns.code, self.columns.severity, strict=True)]
        bounds = self.start.tolist()
        return [joined(pairs[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]

    @cached_property
    def dicts(self) -> list[list[dict[str, Any]]]:
        """Each shot's flags as the API writes them (code, severity, value, limit, message; NaN and
        infinity as null); made once (the JSON file writes
        them with each shot, and the flagged shots' reasons again in its summary)."""
        c = self.columns
        every = [
            {"code": code, "severity": severity, "value": value, "limit": limit, "message": message}
            for code, severity, value, limit, message in zip(
                c.code, c.severity, float_list(c.value), float_list(c.limit), c.message, strict=True
            )
        ]
        return self.per_shot(every)


@dataclass
class ShotTable:
    """Shots column-wise, in the order read. Numeric inputs and outputs are float arrays
    (NaN for null); text inputs are object arrays; ``status`` is text (``not_evaluated``
    for a shot without an evaluation)."""

    shot_pk: np.ndarray
    shot_id: list[str]
    taken_at: list[datetime]
    revision: list[int]
    notes: list[str]
    tags: list[list[str]]
    model_version: list[str | None]
    settings_version: list[int | None]
    status: np.ndarray
    inputs: dict[str, np.ndarray]
    outputs: dict[str, np.ndarray]
    flags: ShotFlags
    extras: list[dict[str, Any]]  # each shot's other top-level sections
    excluded_at: list[datetime | None] = field(default_factory=list)  # when fetched (exclusion=True)
    excluded_reason: list[str | None] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.shot_pk)

    @classmethod
    def from_columns(cls, columns: Mapping[str, list[Any]], flags: FlagColumns | None = None) -> ShotTable:
        """From ``app.store.exports`` columns and flags; columns not fetched come out empty."""
        n = len(columns["shot_pk"])
        inputs: dict[str, np.ndarray] = {}
        for path, column in zip(INPUT_PATHS, SHOT_INPUT_COLUMNS, strict=True):
            if column in columns:  # numpy reads None as NaN in a float array
                inputs[path] = np.array(columns[column], dtype=object if path in TEXT_INPUTS else float).reshape(n)
        outputs = {
            name: np.array(columns[name], dtype=float).reshape(n)
            for name in EVALUATION_OUTPUT_COLUMNS
            if name in columns
        }
        status = np.array(shared([s if s is not None else NOT_EVALUATED for s in columns["status"]]), dtype=object)
        status = status.reshape(n)
        shot_pk = np.array(columns["shot_pk"], dtype=np.int64).reshape(n)
        payloads = columns.get("raw_payload")
        return cls(
            shot_pk=shot_pk,
            shot_id=list(columns.get("shot_id", ())),
            taken_at=list(columns.get("taken_at", ())),
            revision=list(columns.get("revision", ())),
            notes=[text or "" for text in columns.get("notes", ())],
            tags=[list(t or []) for t in columns.get("tags", ())],
            model_version=shared(columns.get("model_version", ())),
            settings_version=list(columns.get("settings_version", ())),
            status=status,
            inputs=inputs,
            outputs=outputs,
            flags=ShotFlags.of_shots(shot_pk, flags if flags is not None else FlagColumns.empty()),
            extras=[other_sections(p) for p in payloads] if payloads is not None else [{} for _ in range(n)],
            excluded_at=list(columns.get("excluded_at", ())),
            excluded_reason=list(columns.get("excluded_reason", ())),
        )

    @classmethod
    def from_chunks(cls, chunks: Iterable[Mapping[str, list[Any]]], flags: FlagColumns | None = None) -> ShotTable:
        """From ``app.store.exports.iter_shot_rows`` chunks (each converted before the next is read) and flags."""
        parts = [cls.from_columns(chunk) for chunk in chunks]
        table = parts[0] if len(parts) == 1 else cls._joined(parts)
        table.flags = ShotFlags.of_shots(table.shot_pk, flags if flags is not None else FlagColumns.empty())
        return table

    @classmethod
    def _joined(cls, parts: Sequence[ShotTable]) -> ShotTable:
        """The parts as one table; their input and output columns are dropped from them as they are
        joined (one column at a time held twice, not the week's 7 MB of numbers)."""

        def arrays(pick: Any) -> np.ndarray:
            return np.concatenate([pick(p) for p in parts])

        def lists(pick: Any) -> list[Any]:
            return [v for p in parts for v in pick(p)]

        first = parts[0]
        return cls(
            shot_pk=arrays(lambda p: p.shot_pk),
            shot_id=lists(lambda p: p.shot_id),
            taken_at=lists(lambda p: p.taken_at),
            revision=lists(lambda p: p.revision),
            notes=lists(lambda p: p.notes),
            tags=lists(lambda p: p.tags),
            model_version=lists(lambda p: p.model_version),
            settings_version=lists(lambda p: p.settings_version),
            status=arrays(lambda p: p.status),
            inputs={path: arrays(lambda p, path=path: p.inputs.pop(path)) for path in list(first.inputs)},
            outputs={name: arrays(lambda p, name=name: p.outputs.pop(name)) for name in list(first.outputs)},
            flags=first.flags,
            extras=lists(lambda p: p.extras),
            excluded_at=lists(lambda p: p.excluded_at),
            excluded_reason=lists(lambda p: p.excluded_reason),
        )

    def values(self, key: str) -> np.ndarray:
        """A numeric input (dotted path) or output (name) as a float array."""
        if key in self.outputs:
            return self.outputs[key]
        return self.inputs[key]

    def extra_cells(self, names: Sequence[str] | None = None) -> dict[str, list[Any]]:
        """The other sections as dotted-path columns (None where a shot lacks one): the
        given ``names``, or every path the shots carry, first seen first."""
        flat = [flat_sections(e) for e in self.extras]
        if names is None:
            names = list(dict.fromkeys(k for row in flat for k in row))
        return {name: [row.get(name) for row in flat] for name in names}


def _input_cells(values: np.ndarray, path: str) -> list[Any]:
    """An input's values as JSON and CSV cells: text ("" for none), integers, floats (None for none)."""
    if path in TEXT_INPUTS:
        return ["" if v is None else str(v) for v in values.tolist()]
    cells = float_list(values)
    if path in INTEGER_INPUTS:
        return [None if v is None else int(v) for v in cells]
    return cells


def _input_csv_cells(table: ShotTable, path: str) -> list[Any] | np.ndarray:
    """An input's CSV cells: a float input as its array (formatted in one go by the CSV writer)."""
    if path in TEXT_INPUTS or path in INTEGER_INPUTS:
        return _input_cells(table.inputs[path], path)
    return table.inputs[path]


_PLAIN_CELLS = frozenset((str, int, float, type(None)))


def _extra_csv_cells(cells: list[Any]) -> list[Any]:
    if {type(v) for v in cells} <= _PLAIN_CELLS:  # the usual column: nothing to convert
        return cells
    return [_extra_cell(v) for v in cells]


def _extra_cell(value: Any) -> Any:
    if isinstance(value, (dict, list)):
        return _json_cell(value)
    if isinstance(value, bool):
        return str(value).lower()
    return value


def csv_columns(
    table: ShotTable, zone: ZoneInfo, extra: Sequence[str] | None = None, *, exclusion: bool = False
) -> list[CsvColumn]:
    """The export table as CSV columns (headers with units by the one label rule); ``extra``
    fixes the other sections' columns when a table is written in chunks; ``exclusion`` adds
    ``excluded_at`` and ``excluded_reason`` (a listing that shows excluded shots)."""
    columns = [
        CsvColumn("shot_id", list(table.shot_id), text=True),
        CsvColumn("taken_at", utc_texts(table.taken_at)),
        CsvColumn("taken_at_local", local_texts(table.taken_at, zone)),
        CsvColumn("revision", list(table.revision)),
        CsvColumn("tags", [joined(t) for t in table.tags], text=True),
        CsvColumn("notes", list(table.notes), text=True),
    ]
    for path, column in zip(INPUT_PATHS, SHOT_INPUT_COLUMNS, strict=True):
        cells = _input_csv_cells(table, path)
        columns.append(CsvColumn(with_unit(column, unit_of(path)), cells, text=path in TEXT_INPUTS))
    columns += [
        CsvColumn("status", [str(s) for s in table.status.tolist()]),
        CsvColumn("flag_codes", table.flags.code_texts()),
    ]
    if exclusion:
        columns += [
            CsvColumn("excluded_at", [None if t is None else format_utc(t) for t in table.excluded_at]),
            CsvColumn("excluded_reason", list(table.excluded_reason), text=True),
        ]
    columns += [
        CsvColumn("model_version", list(table.model_version)),
        CsvColumn("settings_version", list(table.settings_version)),
    ]
    columns += [CsvColumn(with_unit(name, unit_of(name)), table.outputs[name]) for name in EVALUATION_OUTPUT_COLUMNS]
    columns += [CsvColumn(name, _extra_csv_cells(cells), text=True) for name, cells in table.extra_cells(extra).items()]
    return columns


# --- JSON: one object per shot --------------------------------------------------------------------
# Written column by column, not as 10,000 dicts handed to the encoder: each column's values are
# encoded at once (orjson; numbers hold no comma, so one array's text splits into its values) and
# every shot's object is one fill of a template holding the keys. The bytes are orjson's for the
# record below (the encoder gives a value the same text alone as inside a container):
#
#   {"shot_id", "taken_at" (UTC), "revision", "notes", "tags",
#    the inputs nested by section ("plasma": {"density_cm3": ...}, text inputs "" for none),
#    "evaluation": null, or the outputs then "status", "flags" ([{"code", "severity", "value", "limit",
#                  "message"}], as ShotFlags.dicts), "model_version", "settings_version",
#    then the shot's other sections verbatim, except one named like a key above}

INPUT_GROUPS: tuple[tuple[str, tuple[tuple[str, str], ...]], ...] = tuple(
    (group, tuple((path.split(".", 1)[1], path) for path in INPUT_PATHS if path.split(".", 1)[0] == group))
    for group in dict.fromkeys(path.split(".", 1)[0] for path in INPUT_PATHS)
)
RECORD_KEYS = frozenset(
    ("shot_id", "taken_at", "revision", "notes", "tags", "evaluation", *(g for g, _ in INPUT_GROUPS))
)


def _fields(pairs: Sequence[bytes]) -> bytes:
    """``"key":%b`` for each JSON key, comma-separated (a template's slots)."""
    return b",".join(orjson.dumps(key.decode()) + b":%b" for key in pairs)


_RECORD = (
    b"{"
    + _fields([b"shot_id", b"taken_at", b"revision", b"notes", b"tags"])
    + b"".join(
        b"," + orjson.dumps(group) + b":{" + _fields([name.encode() for name, _ in fields]) + b"}"
        for group, fields in INPUT_GROUPS
    )
    + b',"evaluation":%b%b}'  # the last slot: the other sections, each after a comma
)
_EVALUATION = (
    b"{"
    + _fields([*(name.encode() for name in EVALUATION_OUTPUT_COLUMNS), b"status", b"flags"])
    + b","
    + _fields([b"model_version", b"settings_version"])
    + b"}"
)
_FLAG = b"{" + _fields([b"code", b"severity", b"value", b"limit", b"message"]) + b"}"


def _numbers_json(values: list[Any]) -> list[bytes]:
    """Each number's (or None's) JSON text, from one call of the encoder."""
    return orjson.dumps(values)[1:-1].split(b",") if values else []


def _texts_json(values: Sequence[Any]) -> list[bytes]:
    """Each value's JSON text (texts, lists of texts, None)."""
    return [orjson.dumps(v) for v in values]


def _repeated_json(values: Sequence[Any]) -> list[bytes]:
    """Each value's JSON text, encoded once per distinct value (statuses, codes, messages, notes)."""
    seen: dict[Any, bytes] = {}
    return [seen[v] if v in seen else seen.setdefault(v, orjson.dumps(v)) for v in values]


def _tags_json(tags: Sequence[list[str]]) -> list[bytes]:
    """Each shot's tags as a JSON array, encoded once per distinct list (most shots share a few)."""
    seen: dict[tuple[str, ...], bytes] = {}
    out = []
    for t in tags:
        key = tuple(t)
        text = seen.get(key)
        if text is None:
            text = seen[key] = orjson.dumps(t)
        out.append(text)
    return out


def _object_json(value: dict[str, Any]) -> bytes:
    """Another section's values as orjson writes them; the standard encoder for what orjson refuses
    (an integer beyond 64 bits), the same values."""
    try:
        return orjson.dumps(value)
    except TypeError:
        return json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":")).encode("utf-8")


def _input_json(table: ShotTable, path: str, rows: slice) -> list[bytes]:
    cells = _input_cells(table.inputs[path][rows], path)
    return _repeated_json(cells) if path in TEXT_INPUTS else _numbers_json(cells)


def _flags_json(table: ShotTable, rows: slice) -> list[bytes]:
    """Each shot's flags as one JSON array."""
    bounds = table.flags.start[rows.start : rows.stop + 1].tolist()
    if not bounds:
        return []
    c, first, last = table.flags.columns, bounds[0], bounds[-1]
    flags = [
        _FLAG % fields
        for fields in zip(
            _repeated_json(c.code[first:last]),
            _repeated_json(c.severity[first:last]),
            _numbers_json(float_list(c.value[first:last])),
            _numbers_json(float_list(c.limit[first:last])),
            _repeated_json(c.message[first:last]),
            strict=True,
        )
    ]
    return [b"[" + b",".join(flags[a - first : b - first]) + b"]" for a, b in zip(bounds[:-1], bounds[1:], strict=True)]


def _others_json(sections: dict[str, Any]) -> bytes:
    kept = {k: v for k, v in sections.items() if k not in RECORD_KEYS}
    return b"," + _object_json(kept)[1:-1] if kept else b""


def record_json(table: ShotTable, rows: slice) -> list[bytes]:
    """The JSON object of each shot in ``rows`` (a slice with start and stop within the table)."""
    evaluated = [s != NOT_EVALUATED for s in table.status[rows].tolist()]
    evaluations = [
        _EVALUATION % tuple(fields) if done else b"null"
        for done, *fields in zip(
            evaluated,
            *(_numbers_json(float_list(table.outputs[name][rows])) for name in EVALUATION_OUTPUT_COLUMNS),
            _repeated_json(table.status[rows].tolist()),
            _flags_json(table, rows),
            _repeated_json(table.model_version[rows]),
            _numbers_json(table.settings_version[rows]),
            strict=True,
        )
    ]
    columns = [
        _texts_json(table.shot_id[rows]),
        _texts_json(utc_texts(table.taken_at[rows])),
        _numbers_json(table.revision[rows]),
        _repeated_json(table.notes[rows]),
        _tags_json(table.tags[rows]),
        *(_input_json(table, path, rows) for _group, fields in INPUT_GROUPS for _name, path in fields),
        evaluations,
        [_others_json(sections) for sections in table.extras[rows]],
    ]
    return [_RECORD % fields for fields in zip(*columns, strict=True)]


def units_document() -> dict[str, str]:
    """Unit of every numeric input (dotted path) and output (name)."""
    keys = (*(p for p in INPUT_PATHS if p not in TEXT_INPUTS), *EVALUATION_OUTPUT_COLUMNS)
    return {key: unit_of(key) for key in keys}


def arrow_table(table: ShotTable, metadata: Mapping[str, str]) -> Any:
    """The export table as a pyarrow Table: typed columns, units in the field metadata."""
    import pyarrow as pa

    fields: list[Any] = []
    arrays: list[Any] = []

    def add(name: str, array: Any, unit: str = "", metadata: dict[str, str] | None = None) -> None:
        fields.append(pa.field(name, array.type, metadata={"unit": unit} if unit else metadata))
        arrays.append(array)

    add("shot_id", pa.array(table.shot_id, type=pa.string()))
    add("taken_at", pa.array(table.taken_at, type=pa.timestamp("us", tz="UTC")))
    add("revision", pa.array(table.revision, type=pa.int32()))
    add("tags", pa.array(table.tags, type=pa.list_(pa.string())))
    add("notes", pa.array(table.notes, type=pa.string()))
    for path, column in zip(INPUT_PATHS, SHOT_INPUT_COLUMNS, strict=True):
        values = table.inputs[path]
        if path in TEXT_INPUTS:
            add(column, pa.array(values.tolist(), type=pa.string()))
        else:
            add(column, pa.array(values, type=pa.float64(), from_pandas=True), unit_of(path))
    add("status", pa.array(table.status.tolist(), type=pa.string()))
    flag_type = pa.list_(
        pa.struct(
            [
                ("code", pa.string()),
                ("severity", pa.string()),
                ("value", pa.float64()),
                ("limit", pa.float64()),
                ("message", pa.string()),
            ]
        )
    )
    c = table.flags.columns
    flag_rows = pa.StructArray.from_arrays(
        [
            pa.array(c.code, type=pa.string()),
            pa.array(c.severity, type=pa.string()),
            # NaN and infinity are null, as in ShotFlags.dicts
            pa.array(np.where(np.isfinite(c.value), c.value, np.nan), type=pa.float64(), from_pandas=True),
            pa.array(np.where(np.isfinite(c.limit), c.limit, np.nan), type=pa.float64(), from_pandas=True),
            pa.array(c.message, type=pa.string()),
        ],
        fields=list(flag_type.value_type),
    )
    add("flag_codes", pa.ListArray.from_arrays(pa.array(table.flags.start, type=pa.int32()), flag_rows, type=flag_type))
    add("model_version", pa.array(table.model_version, type=pa.string()))
    add("settings_version", pa.array(table.settings_version, type=pa.int32()))
    for name in EVALUATION_OUTPUT_COLUMNS:
        add(name, pa.array(table.outputs[name], type=pa.float64(), from_pandas=True), unit_of(name))
    for name, cells in table.extra_cells().items():
        array, as_json = _extra_array(cells)
        add(name, array, metadata={"encoding": "json"} if as_json else None)
    return pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=dict(metadata)))


def _extra_array(cells: list[Any]) -> tuple[Any, bool]:
    """One typed column of another section's values: numbers, text or booleans as they
    are, anything mixed or nested as JSON text (then True: the field's metadata says
    ``encoding: json``, so that an import reads the values back)."""
    import pyarrow as pa

    kinds = {type(v) for v in cells if v is not None}
    if kinds <= {bool}:
        return pa.array(cells, type=pa.bool_()), False
    if kinds <= {int}:
        try:
            return pa.array(cells, type=pa.int64()), False
        except (OverflowError, pa.ArrowInvalid):
            pass
    if kinds <= {int, float}:
        return pa.array([None if v is None else float(v) for v in cells], type=pa.float64()), False
    if kinds <= {str}:
        return pa.array(cells, type=pa.string()), False
    return pa.array([None if v is None else _json_cell(v) for v in cells], type=pa.string()), True


def _json_cell(value: Any) -> str:
    return json.dumps(value, ensure_ascii=False, separators=(",", ":"))
