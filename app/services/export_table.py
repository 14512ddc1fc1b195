"""The one export table: stored shots with their evaluation, one row per shot, as every
export writes it (the dashboard's table download, the weekly CSV, JSON and Parquet).

Columns, in order: ``shot_id``, ``taken_at`` (UTC), ``taken_at_local`` (the campaign's
zone, with its offset), ``revision``, ``tags``, ``notes``, every model input under its
column name (``model.column_name``: ``plasma_density_cm3``), ``status``, ``flag_codes``
(``CODE:severity`` entries), ``model_version``, ``settings_version``, every model output
under its name, then the shot's other top-level sections (e.g. ``daq``) under their
dotted paths (``daq.run``), which never collide with ours. CSV headers carry units by
the one label rule (``plasma_density_cm3 [cm^-3]``; ``app.presentation.csv_writer``
states the rest of the CSV convention); Parquet keeps each unit in the field's metadata
(and ``encoding: json`` there for a section column written as JSON text);
JSON nests the inputs by section, as the API takes them, and keeps other sections verbatim.
An import reads the same table back: the input columns and the other sections are the
shot; everything else is what wakeledger derived.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

import model
from app.plain import finite_or_none, float_list
from app.presentation.csv_writer import CsvColumn, flag_text, joined
from app.presentation.fields import unit_of, with_unit
from app.store.exports import EVALUATION_OUTPUT_COLUMNS, SHOT_INPUT_COLUMNS, FlagRow
from app.times import format_utc, iso_text

NOT_EVALUATED = "not_evaluated"
ENVELOPE_KEYS = ("shot_id", "taken_at", "notes", "tags")
INPUT_PATHS: tuple[str, ...] = tuple(f.path for f in model.INPUT_FIELDS)
TEXT_INPUTS = frozenset(f.path for f in model.INPUT_FIELDS if f.kind == "enum")
INTEGER_INPUTS = frozenset(f.path for f in model.INPUT_FIELDS if f.kind == "integer")


def other_sections(payload: Mapping[str, Any]) -> dict[str, Any]:
    """The top-level sections of a shot body that wakeledger does not read (kept verbatim)."""
    return {k: v for k, v in payload.items() if k not in ENVELOPE_KEYS and k not in model.SECTIONS}


def flat_sections(sections: Mapping[str, Any]) -> dict[str, Any]:
    """Other sections as dotted-path cells, one level deep: {"daq": {"run": 7}} -> {"daq.run": 7}."""
    out: dict[str, Any] = {}
    for key, value in sections.items():
        if isinstance(value, Mapping):
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
    flags: list[list[FlagRow]]
    extras: list[dict[str, Any]]  # each shot's other top-level sections

    def __len__(self) -> int:
        return len(self.shot_pk)

    @classmethod
    def from_columns(cls, columns: Mapping[str, list[Any]], flags: Iterable[FlagRow] = ()) -> ShotTable:
        """From ``app.store.exports`` columns; columns not fetched come out empty."""
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
        status = np.array([s if s is not None else NOT_EVALUATED for s in columns["status"]], dtype=object).reshape(n)
        per_shot: list[list[FlagRow]] = [[] for _ in range(n)]
        index = {pk: i for i, pk in enumerate(columns["shot_pk"])}
        for flag in flags:
            i = index.get(flag.shot_pk)
            if i is not None:
                per_shot[i].append(flag)
        payloads = columns.get("raw_payload")
        return cls(
            shot_pk=np.array(columns["shot_pk"], dtype=np.int64).reshape(n),
            shot_id=list(columns.get("shot_id", ())),
            taken_at=list(columns.get("taken_at", ())),
            revision=list(columns.get("revision", ())),
            notes=[text or "" for text in columns.get("notes", ())],
            tags=[list(t or []) for t in columns.get("tags", ())],
            model_version=list(columns.get("model_version", ())),
            settings_version=list(columns.get("settings_version", ())),
            status=status,
            inputs=inputs,
            outputs=outputs,
            flags=per_shot,
            extras=[other_sections(p) for p in payloads] if payloads is not None else [{} for _ in range(n)],
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


def flag_dict(f: FlagRow) -> dict[str, Any]:
    return {
        "code": f.code,
        "severity": f.severity,
        "value": finite_or_none(f.value),
        "limit": finite_or_none(f.limit),
        "message": f.message,
    }


def _input_cells(table: ShotTable, path: str) -> list[Any]:
    values = table.inputs[path]
    if path in TEXT_INPUTS:
        return ["" if v is None else str(v) for v in values.tolist()]
    cells = float_list(values)
    if path in INTEGER_INPUTS:
        return [None if v is None else int(v) for v in cells]
    return cells


def _extra_cell(value: Any) -> Any:
    if isinstance(value, (dict, list)):
        return _json_cell(value)
    if isinstance(value, bool):
        return str(value).lower()
    return value


def csv_columns(table: ShotTable, zone: ZoneInfo, extra: Sequence[str] | None = None) -> list[CsvColumn]:
    """The export table as CSV columns (headers with units by the one label rule); ``extra``
    fixes the other sections' columns when a table is written in chunks."""
    columns = [
        CsvColumn("shot_id", list(table.shot_id), text=True),
        CsvColumn("taken_at", [format_utc(t) for t in table.taken_at]),
        CsvColumn("taken_at_local", [iso_text(t.astimezone(zone)) for t in table.taken_at]),
        CsvColumn("revision", list(table.revision)),
        CsvColumn("tags", [joined(t) for t in table.tags], text=True),
        CsvColumn("notes", list(table.notes), text=True),
    ]
    for path, column in zip(INPUT_PATHS, SHOT_INPUT_COLUMNS, strict=True):
        columns.append(CsvColumn(with_unit(column, unit_of(path)), _input_cells(table, path), text=path in TEXT_INPUTS))
    columns += [
        CsvColumn("status", [str(s) for s in table.status.tolist()]),
        CsvColumn("flag_codes", [flag_text((f.code, f.severity) for f in flags) for flags in table.flags]),
        CsvColumn("model_version", list(table.model_version)),
        CsvColumn("settings_version", list(table.settings_version)),
    ]
    columns += [
        CsvColumn(with_unit(name, unit_of(name)), float_list(table.outputs[name])) for name in EVALUATION_OUTPUT_COLUMNS
    ]
    columns += [
        CsvColumn(name, [_extra_cell(v) for v in cells], text=True) for name, cells in table.extra_cells(extra).items()
    ]
    return columns


def records(table: ShotTable) -> Iterator[dict[str, Any]]:
    """One JSON object per shot: inputs nested by section, the evaluation as the shot API
    shows it, and the shot's other sections verbatim."""
    sections: dict[str, list[tuple[str, list[Any]]]] = {}
    for path in INPUT_PATHS:
        group, name = path.split(".", 1)
        sections.setdefault(group, []).append((name, _input_cells(table, path)))
    n = len(table)
    # Per group: its field names and one tuple of values per shot (dict(zip()) is the
    # fastest way to build 10,000 small dicts).
    groups = [
        (group, [name for name, _ in fields], list(zip(*(cells for _, cells in fields), strict=True)) or [()] * n)
        for group, fields in sections.items()
    ]
    output_names = list(EVALUATION_OUTPUT_COLUMNS)
    output_rows = list(zip(*(float_list(table.outputs[name]) for name in output_names), strict=True)) or [()] * n
    status = table.status.tolist()
    for i in range(n):
        record: dict[str, Any] = {
            "shot_id": table.shot_id[i],
            "taken_at": format_utc(table.taken_at[i]),
            "revision": table.revision[i],
            "notes": table.notes[i],
            "tags": table.tags[i],
        }
        for group, names, rows in groups:
            record[group] = dict(zip(names, rows[i], strict=True))
        if status[i] == NOT_EVALUATED:
            record["evaluation"] = None
        else:
            evaluation = dict(zip(output_names, output_rows[i], strict=True))
            evaluation["status"] = status[i]
            evaluation["flags"] = [flag_dict(f) for f in table.flags[i]]
            evaluation["model_version"] = table.model_version[i]
            evaluation["settings_version"] = table.settings_version[i]
            record["evaluation"] = evaluation
        for key, value in table.extras[i].items():
            record.setdefault(key, value)
        yield record


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
    add("flag_codes", pa.array([[flag_dict(f) for f in per] for per in table.flags], type=flag_type))
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
