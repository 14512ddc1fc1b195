"""Files of shots read into one shape, ``SourceTable``: the file's column names and its
rows as ``{column: cell}``, numbered from 1 (row 1 is the first shot: the line after a
CSV header, the first non-blank line of JSON lines).

- **CSV** — one header row; every cell is text (``typed`` is False), read with the
  standard ``csv`` module so that nothing is guessed (a shot id ``000123`` stays text).
  UTF-8, with or without a byte-order mark.
- **Parquet** — typed cells as pyarrow reads them; a column whose field metadata says
  ``encoding: json`` holds JSON text (our export writes nested or mixed sections so).
- **JSON lines** — one shot object per line, in the API's shape (sections nested) or
  flat with column names; nested objects become dotted columns one level deep
  (``{"daq": {"run": 7}}`` -> ``daq.run``), as the export flattens other sections.
  A ``.json`` file holding a list of shots, or an object with a ``shots`` list (the
  weekly JSON export), is read the same way.
- **HDF5** (h5py) — either one compound dataset (a table: its fields are the columns)
  or one one-dimensional dataset per column, named by its path below the group with
  ``/`` read as ``.`` (``/plasma/density_cm3`` -> ``plasma.density_cm3``); all of one
  length. Byte strings are read as UTF-8 text. ``table`` picks the dataset or group.

Problems of the file as a whole raise ``SourceError``; a row that cannot be read (a
line that is not JSON, a CSV row with more cells than the header) is kept in
``row_problems`` and reported with the failing rows.
"""

from __future__ import annotations

import csv
import json
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from app.errors import FieldProblem

FORMATS = ("csv", "parquet", "jsonl", "json", "hdf5")
SUFFIXES = {
    ".csv": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".json": "json",
    ".h5": "hdf5",
    ".hdf5": "hdf5",
    ".hdf": "hdf5",
}
JSON_ENCODING = b"json"  # Parquet field metadata {"encoding": "json"}: the text cells are JSON


class SourceError(ValueError):
    """The file cannot be read as shots (the message says why, in the user's words)."""


@dataclass
class SourceTable:
    format: str
    columns: list[str]  # as written in the file (CSV headers with their units)
    count: int
    read: Callable[[int, int], list[dict[str, Any]]]  # rows [start, stop) of the file, 0-based
    typed: bool = True  # False: every cell is text (CSV)
    json_columns: frozenset[str] = frozenset()
    row_problems: dict[int, list[FieldProblem]] = field(default_factory=dict)  # row number -> problems

    def __len__(self) -> int:
        return self.count

    def rows(self, start: int, stop: int) -> list[dict[str, Any]]:
        return self.read(start, min(stop, self.count))


def format_of(path: Path, given: str | None = None) -> str:
    if given:
        if given not in FORMATS:
            raise SourceError(f"unknown format {given!r}; choose one of {', '.join(FORMATS)}")
        return given
    fmt = SUFFIXES.get(path.suffix.lower())
    if fmt is None:
        raise SourceError(
            f"cannot tell the format of {path.name!r} from its extension; give --format ({', '.join(FORMATS)})"
        )
    return fmt


def read_source(path: Path, fmt: str | None = None, table: str | None = None) -> SourceTable:
    """The file as a SourceTable; SourceError when it cannot be read at all."""
    fmt = format_of(path, fmt)
    if not path.is_file():
        raise SourceError(f"{str(path)!r} is not a file")
    try:
        if fmt == "csv":
            return _read_csv(path)
        if fmt == "parquet":
            return _read_parquet(path)
        if fmt == "hdf5":
            return _read_hdf5(path, table)
        return _read_json(path, lines=fmt == "jsonl")
    except OSError as exc:
        raise SourceError(f"cannot read {str(path)!r}: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise SourceError(f"{path.name!r} is not UTF-8 text (byte {exc.start})") from None


def _from_dicts(fmt: str, rows: list[dict[str, Any]], problems: dict[int, list[FieldProblem]]) -> SourceTable:
    columns = list(dict.fromkeys(k for row in rows for k in row))
    return SourceTable(fmt, columns, len(rows), lambda a, b: rows[a:b], row_problems=problems)


# --- CSV ------------------------------------------------------------------------------------------


def _read_csv(path: Path) -> SourceTable:
    with path.open(newline="", encoding="utf-8-sig") as handle:
        reader = csv.reader(handle)
        header: list[str] | None = None
        cells: list[list[str]] = []
        for line in reader:
            if not line or (len(line) == 1 and not line[0].strip()):
                continue  # blank line
            if header is None:
                header = [h.strip() for h in line]
                continue
            cells.append(line)
    if header is None:
        raise SourceError(f"{path.name!r} is empty: no header row")
    repeated = sorted({h for h in header if header.count(h) > 1})
    if repeated:
        raise SourceError(f"the CSV header repeats column(s) {', '.join(map(repr, repeated))}")
    problems: dict[int, list[FieldProblem]] = {}
    width = len(header)
    for number, line in enumerate(cells, start=1):
        if len(line) > width and any(c.strip() for c in line[width:]):
            problems[number] = [("(row)", f"has {len(line)} cells, the header {width}")]

    def read(start: int, stop: int) -> list[dict[str, Any]]:
        return [dict(zip(header, line, strict=False)) for line in cells[start:stop]]

    return SourceTable("csv", header, len(cells), read, typed=False, row_problems=problems)


# --- Parquet --------------------------------------------------------------------------------------


def _read_parquet(path: Path) -> SourceTable:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(path)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
        raise SourceError(f"{path.name!r} is not a readable Parquet file: {exc}") from None
    json_columns = frozenset(
        f.name for f in table.schema if f.metadata and f.metadata.get(b"encoding") == JSON_ENCODING
    )
    for i, f in enumerate(table.schema):  # nanosecond instants would come out as pandas objects
        if pa.types.is_timestamp(f.type) and f.type.unit == "ns":
            table = table.set_column(i, f, table.column(i).cast(pa.timestamp("us", tz=f.type.tz), safe=False))

    def read(start: int, stop: int) -> list[dict[str, Any]]:
        return table.slice(start, stop - start).to_pylist()

    return SourceTable("parquet", list(table.column_names), table.num_rows, read, json_columns=json_columns)


# --- JSON lines and JSON --------------------------------------------------------------------------


def flat_row(shot: Mapping[str, Any]) -> dict[str, Any]:
    """A shot object as dotted columns one level deep (the export's rule for other sections)."""
    out: dict[str, Any] = {}
    for key, value in shot.items():
        if isinstance(value, Mapping) and value:
            for sub, cell in value.items():
                out[f"{key}.{sub}"] = cell
        else:
            out[str(key)] = value
    return out


def _read_json(path: Path, lines: bool) -> SourceTable:
    rows: list[dict[str, Any]] = []
    problems: dict[int, list[FieldProblem]] = {}
    if lines:
        with path.open(encoding="utf-8-sig") as handle:
            texts = [t for t in handle if t.strip()]
        shots: list[Any] = []
        for number, text in enumerate(texts, start=1):
            try:
                shots.append(json.loads(text))
            except json.JSONDecodeError as exc:
                shots.append(None)
                problems[number] = [("(row)", f"the line is not valid JSON: {exc.msg} at column {exc.colno}")]
    else:
        try:
            document = json.loads(path.read_text(encoding="utf-8-sig"))
        except json.JSONDecodeError as exc:
            raise SourceError(
                f"{path.name!r} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
            ) from None
        if isinstance(document, Mapping) and isinstance(document.get("shots"), list):
            document = document["shots"]
        if not isinstance(document, list):
            raise SourceError(f"{path.name!r} holds no list of shots (a JSON list, or an object with a 'shots' list)")
        shots = document
    for number, shot in enumerate(shots, start=1):
        if isinstance(shot, Mapping):
            rows.append(flat_row(shot))
        else:
            rows.append({})
            problems.setdefault(number, [("(row)", "a shot must be a JSON object")])
    return _from_dicts("jsonl" if lines else "json", rows, problems)


# --- HDF5 -----------------------------------------------------------------------------------------


def _cells(values: Any) -> list[Any]:
    """A numpy column as Python values, byte strings decoded as UTF-8 and NaN kept."""
    cells = values.tolist()
    if values.dtype.kind in ("S", "O"):
        cells = [c.decode("utf-8") if isinstance(c, bytes) else c for c in cells]
    return cells


def _read_hdf5(path: Path, table: str | None) -> SourceTable:
    import h5py

    try:
        handle = h5py.File(path, "r")
    except OSError as exc:
        raise SourceError(f"{path.name!r} is not a readable HDF5 file: {exc}") from None
    with handle:
        if table is not None and table not in handle:
            raise SourceError(f"{path.name!r} has no dataset or group {table!r}")
        node = handle[table] if table is not None else handle
        datasets: list[tuple[str, Any]] = []
        if isinstance(node, h5py.Dataset):
            datasets = [(node.name.lstrip("/"), node)]
        else:
            node.visititems(lambda name, obj: datasets.append((name, obj)) if isinstance(obj, h5py.Dataset) else None)
        compound = [(name, ds) for name, ds in datasets if ds.dtype.names]
        columns: dict[str, list[Any]] = {}
        if compound:
            if len(compound) > 1:
                tables = ", ".join(repr(n) for n, _ in compound)
                raise SourceError(f"{path.name!r} holds several tables ({tables}); choose one with --table")
            name, ds = compound[0]
            if ds.ndim != 1:
                raise SourceError(f"the table {name!r} is not one-dimensional (shape {ds.shape})")
            data = ds[()]
            columns = {f: _cells(data[f]) for f in ds.dtype.names}
        else:
            if not datasets:
                raise SourceError(f"{path.name!r} holds no datasets" + (f" under {table!r}" if table else ""))
            for name, ds in datasets:
                if ds.ndim != 1:
                    raise SourceError(f"dataset {name!r} is not one-dimensional (shape {ds.shape})")
                columns[name.replace("/", ".")] = _cells(ds[()])
            lengths = {n: len(c) for n, c in columns.items()}
            if len(set(lengths.values())) > 1:
                listed = ", ".join(f"{n!r}: {k}" for n, k in lengths.items())
                raise SourceError(f"the datasets are not of one length ({listed})")
    names = list(columns)
    count = len(next(iter(columns.values()))) if columns else 0

    def read(start: int, stop: int) -> list[dict[str, Any]]:
        return [{n: columns[n][i] for n in names} for i in range(start, stop)]

    return SourceTable("hdf5", names, count, read)


def is_missing(cell: Any) -> bool:
    """No value: None, or a NaN (a typed file's missing number)."""
    return cell is None or (isinstance(cell, float) and math.isnan(cell))
