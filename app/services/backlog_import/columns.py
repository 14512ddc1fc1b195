"""Which shot field each column of a file fills, and a row turned into a shot body.

Column names follow our export table (``app.services.export_table``): ``shot_id``,
``taken_at``, ``notes``, ``tags``, every input under its column name
(``plasma_density_cm3``) or dotted path (``plasma.density_cm3``), other top-level
sections under their dotted paths (``daq.run``) or bare names. A unit in brackets at the
end of a name (``plasma_density_cm3 [cm^-3]``) is dropped. What wakeledger derives
(``taken_at_local``, ``revision``, ``status``, ``flag_codes``, ``model_version``,
``settings_version``, every model output, the JSON export's ``evaluation``) is ignored.
A column that looks like a field of a physics section but is none
(``plasma_densty_cm3``) goes into that section, where the ingest checks refuse it with a
"did you mean".

A map file (JSON or TOML) renames the file's columns, and converts nothing::

    [columns]            # file column -> our field (dotted path or column name)
    ne = "plasma.density_cm3"
    shot = "shot_id"
    run = "daq.run"
    ignore = ["operator"]  # (top level, beside [columns]) columns left out

Cells become the values of a shot body as the API takes it; every check of those values
is the ingest service's (``app.services.ingest.payloads``), not this module's. Text cells
(CSV) are read back by the export's CSV convention: numbers of numeric inputs as numbers,
tags split at ``;``, the leading apostrophe of a defused formula dropped, other sections'
cells read as JSON where they parse as JSON (``7``, ``true``, ``{"a": 1}``) and as text
otherwise. An empty cell is no value.
"""

from __future__ import annotations

import difflib
import json
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from functools import cached_property
from pathlib import Path
from typing import Any

import model
from app.presentation.csv_writer import LIST_SEPARATOR
from app.services.backlog_import.readers import SourceError, SourceTable, is_missing
from app.services.export_table import ENVELOPE_KEYS, INPUT_PATHS, INTEGER_INPUTS, TEXT_INPUTS
from app.services.weekly.summary_rows import SUMMARY_COLUMNS
from app.store.exports import EVALUATION_OUTPUT_COLUMNS
from app.times import format_utc

DERIVED = frozenset(
    {
        "taken_at_local",
        "revision",
        "status",
        "flag_codes",
        "flags",  # the name of flag_codes in exports before document version 2
        "model_version",
        "settings_version",
        "evaluation",
        "defaulted_fields",
        *EVALUATION_OUTPUT_COLUMNS,
    }
)
INPUT_BY_COLUMN = {model.column_name(p): p for p in INPUT_PATHS}
_UNIT = re.compile(r"^(.*?)\s*\[[^\[\]]*\]$")
_INTEGER_TEXT = re.compile(r"^[+-]?\d+$")
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")  # what csv_writer.defuse guards


def without_unit(name: str) -> str:
    """``plasma_density_cm3 [cm^-3]`` -> ``plasma_density_cm3``."""
    match = _UNIT.match(name.strip())
    return match.group(1) if match else name.strip()


@dataclass(frozen=True)
class Target:
    """Where a column's cells go: ``envelope`` (shot_id, taken_at, notes, tags), ``input``
    (a physics section field, known or not), ``section`` (another top-level section or
    one of its keys), or ``ignored``."""

    kind: str
    path: str = ""


IGNORED = Target("ignored")


def default_target(name: str) -> Target:
    """The field a column of this name fills by our export's naming."""
    bare = without_unit(name)
    if bare in ENVELOPE_KEYS:
        return Target("envelope", bare)
    if bare in DERIVED or bare.split(".", 1)[0] in DERIVED:  # "evaluation.status" of flattened JSON too
        return IGNORED
    if bare in INPUT_BY_COLUMN:
        return Target("input", INPUT_BY_COLUMN[bare])
    section, dot, rest = bare.partition(".")
    if section in model.SECTIONS and dot and rest:
        return Target("input", bare)
    for sec in model.SECTIONS:
        if bare.startswith(sec + "_") and len(bare) > len(sec) + 1:
            return Target("input", f"{sec}.{bare[len(sec) + 1 :]}")
    return Target("section", bare)


def _map_target(column: str, text: Any) -> Target:
    """A map file's target, checked: our field without a unit."""
    where = f"the map's target {text!r} for column {column!r}"
    if not isinstance(text, str) or not text.strip():
        raise SourceError(f"{where} must be a field name such as 'plasma.density_cm3'")
    name = text.strip()
    if "[" in name:
        raise SourceError(f"{where}: name the field without a unit (the map renames; it converts nothing)")
    target = default_target(name)
    if target.kind == "ignored":
        raise SourceError(f"{where}: {name!r} is derived by wakeledger and never imported; list the column in 'ignore'")
    if target.kind == "input" and target.path not in INPUT_PATHS:
        close = difflib.get_close_matches(target.path, INPUT_PATHS, n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise SourceError(f"{where}: {target.path!r} is no field of the model{hint}")
    if target.kind == "section" and (name in model.SECTIONS or any(not p for p in name.split("."))):
        raise SourceError(f"{where} must name one field (e.g. 'plasma.density_cm3' or 'daq.run')")
    return target


@dataclass
class ColumnMap:
    """A map file: file column -> our field; columns left out."""

    renames: dict[str, Target] = field(default_factory=dict)
    ignore: frozenset[str] = frozenset()


def load_map(path: Path) -> ColumnMap:
    """Read a JSON or TOML map file (by its extension; JSON otherwise); SourceError names the problem."""
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise SourceError(f"cannot read the map {str(path)!r}: {exc.strerror or exc}") from None
    try:
        document = tomllib.loads(text) if path.suffix.lower() == ".toml" else json.loads(text)
    except (tomllib.TOMLDecodeError, json.JSONDecodeError) as exc:
        raise SourceError(f"the map {path.name!r} is not valid {path.suffix.lstrip('.') or 'JSON'}: {exc}") from None
    if not isinstance(document, Mapping):
        raise SourceError(f"the map {path.name!r} must be an object with 'columns' (and optionally 'ignore')")
    unknown = sorted(set(document) - {"columns", "ignore"})
    if unknown:
        raise SourceError(f"the map {path.name!r} has unknown key(s) {', '.join(unknown)}; it takes columns and ignore")
    columns = document.get("columns", {})
    ignore = document.get("ignore", [])
    if not isinstance(columns, Mapping):
        raise SourceError(
            f"the map's 'columns' must be an object of file column -> field, not {type(columns).__name__}"
        )
    if not isinstance(ignore, list) or not all(isinstance(c, str) for c in ignore):
        raise SourceError("the map's 'ignore' must be a list of column names")
    return ColumnMap({str(k): _map_target(str(k), v) for k, v in columns.items()}, frozenset(ignore))


@dataclass
class ColumnPlan:
    """Every column of a file with its target; ``column_of`` names the column behind a field."""

    targets: dict[str, Target]

    @property
    def ignored(self) -> list[str]:
        """The ignored columns; a derived object flattened from JSON (``evaluation.status``, ...) once."""
        names = (
            c.split(".", 1)[0] if c.split(".", 1)[0] in DERIVED else c
            for c, t in self.targets.items()
            if t.kind == "ignored"
        )
        return list(dict.fromkeys(names))

    @cached_property
    def filled(self) -> list[tuple[str, Target, str, str | None]]:
        """(column, target, top-level key, key inside it or None) of every column that fills a field."""
        out: list[tuple[str, Target, str, str | None]] = []
        for column, target in self.targets.items():
            if target.kind == "ignored":
                continue
            head, dot, rest = target.path.partition(".")
            out.append((column, target, head, rest if dot and target.kind != "envelope" else None))
        return out

    def column_of(self, path: str) -> str | None:
        """The file column that filled ``path`` (or the nearest enclosing field)."""
        by_path = {t.path: c for c, t in self.targets.items() if t.kind != "ignored"}
        parts = path.split(".")
        for end in range(len(parts), 0, -1):
            column = by_path.get(".".join(parts[:end]))
            if column is not None:
                return column
        return None


def plan_columns(columns: Sequence[str], column_map: ColumnMap | None = None) -> ColumnPlan:
    """Targets of the file's columns; SourceError for a map naming absent columns, two
    columns filling one field, or no column for shot_id or taken_at."""
    column_map = column_map or ColumnMap()
    present = set(columns)
    if tuple(columns[: len(SUMMARY_COLUMNS)]) == SUMMARY_COLUMNS and "shot_id" not in present:
        raise SourceError(
            "this is a week's summary table (one row per figure), not shots: import the week's shot CSV "
            "(wakeledger export without --table summary)"
        )
    stripped: dict[str, str] = {}
    for c in columns:
        stripped.setdefault(without_unit(c), c)

    def find(name: str) -> str | None:
        return name if name in present else stripped.get(without_unit(name))

    named: dict[str, Target] = {}
    for key, target in column_map.renames.items():
        column = find(key)
        if column is None:
            raise SourceError(f"the map names column {key!r}, which the file does not have")
        named[column] = target
    for key in column_map.ignore:
        column = find(key)
        if column is None:
            raise SourceError(f"the map ignores column {key!r}, which the file does not have")
        named[column] = IGNORED
    targets = {c: named.get(c) or default_target(c) for c in columns}
    by_path: dict[str, str] = {}
    for column, target in targets.items():
        if target.kind == "ignored":
            continue
        if target.path in by_path:
            raise SourceError(f"columns {by_path[target.path]!r} and {column!r} both fill {target.path!r}")
        by_path[target.path] = column
    for path, column in by_path.items():
        head = path.split(".", 1)[0]
        if head != path and head in by_path:
            raise SourceError(f"column {by_path[head]!r} fills all of {head!r}, so {column!r} cannot fill {path!r}")
    for needed in ("shot_id", "taken_at"):
        if needed not in by_path:
            raise SourceError(f"no column gives {needed}; name it {needed!r} or map a column to it with --map")
    return ColumnPlan(targets)


# --- cells -> a shot body -----------------------------------------------------------------------------


def _undefused(text: str) -> str:
    """Drop the apostrophe the CSV convention puts before formula-like text."""
    return text[1:] if text.startswith("'") and text[1:2].startswith(_FORMULA_STARTS) and len(text) > 1 else text


def _no_constants(name: str) -> Any:
    raise ValueError(name)


def _json_or_text(text: str) -> Any:
    try:
        return json.loads(text, parse_constant=_no_constants)
    except ValueError:
        return text


def _number(text: str) -> Any:
    """Text of a number as the number (integers as int); other text stays, for the checks to refuse."""
    stripped = text.strip()
    if _INTEGER_TEXT.match(stripped):
        return int(stripped)
    try:
        return float(stripped)
    except ValueError:
        return text


def _cell_value(target: Target, cell: Any, typed: bool, json_text: bool) -> Any:
    """The body value of one cell, or None for no value."""
    if is_missing(cell):
        return None
    if isinstance(cell, str) and not typed:
        cell = _undefused(cell)
        if cell == "":
            return None
    path = target.path
    if target.kind == "envelope":
        if path == "shot_id" and isinstance(cell, int | float) and not isinstance(cell, bool) and cell == int(cell):
            return str(int(cell))  # numbered shots (HDF5, Parquet) keep their number as the id
        if path == "taken_at" and isinstance(cell, datetime):
            return format_utc(cell) if cell.utcoffset() is not None else cell.isoformat()
        if path == "tags":
            if isinstance(cell, str):
                return cell.split(LIST_SEPARATOR) if cell else None
            if isinstance(cell, list | tuple):
                return list(cell) or None
            return cell
        if path == "notes" and cell == "":
            return None
        return cell
    if target.kind == "input" and path in INPUT_PATHS:
        if path in TEXT_INPUTS:
            return None if cell == "" else cell
        if isinstance(cell, str) and not typed:
            cell = _number(cell)
        if path in INTEGER_INPUTS and isinstance(cell, float) and cell.is_integer():
            return int(cell)
        return cell
    if isinstance(cell, str) and (json_text or not typed):
        return _json_or_text(cell) if cell else cell
    return cell


def shot_body(row: Mapping[str, Any], plan: ColumnPlan, source: SourceTable) -> dict[str, Any]:
    """One row as a shot body (only the cells with a value)."""
    body: dict[str, Any] = {}
    for column, target, head, rest in plan.filled:
        if column not in row:
            continue
        value = _cell_value(target, row[column], source.typed, column in source.json_columns)
        if value is None:
            continue
        if rest is None:
            body[target.path] = value
        else:
            section = body.setdefault(head, {})
            if isinstance(section, dict):
                section[rest] = value
    return body
