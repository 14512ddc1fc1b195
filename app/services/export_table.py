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
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

import model
from app.plain import finite_or_none, float_list
from app.presentation.csv_writer import CsvColumn, joined
from app.presentation.fields import unit_of, with_unit
from app.store.exports import EVALUATION_OUTPUT_COLUMNS, SHOT_INPUT_COLUMNS, FlagColumns, FlagRow, shared
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
            flags = _taken(flags, order)
            row = row[order]
        start = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(row, minlength=n), out=start[1:])
        return cls(start, flags)

    def __len__(self) -> int:
        return len(self.start) - 1

    def __getitem__(self, i: int) -> list[FlagRow]:
        """Shot ``i``'s flags."""
        c, a, b = self.columns, int(self.start[i]), int(self.start[i + 1])
        return [
            FlagRow(pk, c.code[j], c.severity[j], value, limit, c.message[j])
            for j, pk, value, limit in zip(
                range(a, b), c.shot_pk[a:b].tolist(), float_list(c.value[a:b]), float_list(c.limit[a:b]), strict=True
            )
        ]

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

    def dicts(self) -> list[list[dict[str, Any]]]:
        """Each shot's flags as the API writes them (``flag_dict``)."""
        c = self.columns
        every = [
            {"code": code, "severity": severity, "value": value, "limit": limit, "message": message}
            for code, severity, value, limit, message in zip(
                c.code, c.severity, float_list(c.value), float_list(c.limit), c.message, strict=True
            )
        ]
        return self.per_shot(every)


def _taken(flags: FlagColumns, order: np.ndarray) -> FlagColumns:
    picks = order.tolist()
    return FlagColumns(
        flags.shot_pk[order],
        [flags.code[j] for j in picks],
        [flags.severity[j] for j in picks],
        flags.value[order],
        flags.limit[order],
        [flags.message[j] for j in picks],
    )


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
            inputs={path: arrays(lambda p, path=path: p.inputs[path]) for path in first.inputs},
            outputs={name: arrays(lambda p, name=name: p.outputs[name]) for name in first.outputs},
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


def _input_csv_cells(table: ShotTable, path: str) -> list[Any] | np.ndarray:
    """An input's CSV cells: a float input as its array (formatted in one go by the CSV writer)."""
    if path in TEXT_INPUTS or path in INTEGER_INPUTS:
        return _input_cells(table, path)
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
    flags = table.flags.dicts()
    taken_at = utc_texts(table.taken_at)
    for i in range(n):
        record: dict[str, Any] = {
            "shot_id": table.shot_id[i],
            "taken_at": taken_at[i],
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
            evaluation["flags"] = flags[i]
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
    c = table.flags.columns
    flag_rows = pa.StructArray.from_arrays(
        [
            pa.array(c.code, type=pa.string()),
            pa.array(c.severity, type=pa.string()),
            # NaN and infinity are null, as in flag_dict
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
