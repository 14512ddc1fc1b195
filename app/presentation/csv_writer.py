"""The one CSV convention of every export (the dashboard's table download, the weekly
summary over the API and the CLI, the planner's files):

- one header row, then one row per shot; UTF-8, CRLF line ends (RFC 4180);
- headers follow the label rule of ``app.presentation.fields``: ``name [unit]``;
- instants are UTC, ISO 8601 with the ``Z`` offset (``app.times.format_utc``);
- numbers are unrounded (Python's shortest round-trip text, ``repr``), an empty cell is no value;
- lists in one cell (flags as ``CODE:severity``, tags) are joined by ``;``;
- a text cell that a spreadsheet would run as a formula (it starts with ``=``, ``+``,
  ``-``, ``@``, a tab or a carriage return) is written with a leading apostrophe;
- a cell is quoted only when it holds a comma, a double quote (doubled) or a line break.

The bytes are those of the standard ``csv.writer`` (QUOTE_MINIMAL, ``\\r\\n``) over the same
cells, written column by column: a float column given as a numpy array is formatted in one
go (``number_texts``), and rows are joined at the end. ``tests/summary/test_columns_written_at_once.py``
holds the equality.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, BinaryIO

import numpy as np
import orjson

LIST_SEPARATOR = ";"
LINE_END = "\r\n"
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_NEEDS_QUOTES = re.compile(r'[,"\r\n]')
_MAY_RUN = re.compile("(?:^|\x00)[=+\\-@\t\r]")  # a cell of a NUL-joined column that may need defusing
# Where orjson's shortest round-trip text and Python's repr agree on the notation (fixed
# point, ".0" after a whole number); outside it repr writes an exponent (1e-05, 1e+16).
_FIXED_LOW, _FIXED_HIGH = 1e-4, 1e16


def defuse(text: str) -> str:
    """Keep spreadsheets from running cell text as a formula."""
    return "'" + text if text.startswith(_FORMULA_STARTS) else text


def joined(items: Iterable[str]) -> str:
    return LIST_SEPARATOR.join(items)


def flag_text(flags: Iterable[tuple[str, str]]) -> str:
    """(code, severity) pairs as one cell: ``WEAK_SEED:marginal;HOSING_RISK:outside``."""
    return joined(f"{code}:{severity}" for code, severity in flags)


@dataclass
class CsvColumn:
    """A column of a CSV file: its header and its cells: a list (None for an empty cell) or a
    numeric numpy array (NaN and infinity for an empty cell)."""

    header: str
    cells: list[Any] | np.ndarray
    text: bool = False  # text cells are defused; numbers are written as they are


def quoted(text: str) -> str:
    """A cell as ``csv.writer`` writes it: quoted (quotes doubled) when it holds a comma, a quote or a line break."""
    return '"' + text.replace('"', '""') + '"' if _NEEDS_QUOTES.search(text) else text


def number_texts(values: np.ndarray) -> list[str]:
    """Python's ``repr`` of every finite float, "" for NaN and infinity, for a whole column at once:
    orjson writes the same shortest round-trip digits (and the same fixed-point text between 1e-4
    and 1e16) about three times faster; the few values outside that range go through repr."""
    v = np.ascontiguousarray(values, dtype=np.float64).reshape(-1)
    if not v.size:
        return []
    texts = orjson.dumps(v, option=orjson.OPT_SERIALIZE_NUMPY).decode("ascii")[1:-1].split(",")
    magnitude = np.abs(v)
    finite = np.isfinite(v)
    for i in np.flatnonzero(finite & (v != 0) & ((magnitude < _FIXED_LOW) | (magnitude >= _FIXED_HIGH))).tolist():
        texts[i] = repr(float(v[i]))
    for i in np.flatnonzero(~finite).tolist():
        texts[i] = ""
    return texts


def _integer_texts(values: np.ndarray) -> list[str]:
    return [str(v) for v in values.reshape(-1).tolist()]


def cell_texts(cells: list[Any] | np.ndarray, text: bool = False) -> list[str]:
    """Cells as written: numbers as text, text defused (``text``), quoted where needed."""
    if isinstance(cells, np.ndarray):
        if cells.dtype.kind == "f":
            return number_texts(cells)
        if cells.dtype.kind in "iub":
            return _integer_texts(cells)
        cells = cells.tolist()
    texts = [c if type(c) is str else "" if c is None else str(c) for c in cells]
    if text and _MAY_RUN.search("\x00".join(texts)):  # one search for the column: most have no such cell
        texts = [defuse(t) if isinstance(c, str) else t for c, t in zip(cells, texts, strict=True)]
    if _NEEDS_QUOTES.search("".join(texts)):  # one search for the column: most need no quotes
        texts = [quoted(t) for t in texts]
    return texts


def _pieces(chunks: Iterable[Sequence[CsvColumn]], chunk_rows: int = 1000) -> Iterator[tuple[str, int]]:
    """(text, rows in it) of column chunks, the first chunk's headers as the header row; the
    cells are formatted ``chunk_rows`` rows at a time, so their text never all lives at once."""
    header_written = False
    for columns in chunks:
        if not header_written:
            yield _row([quoted(c.header) for c in columns]), 0
            header_written = True
        rows = min((len(c.cells) for c in columns), default=0)
        for start in range(0, rows, chunk_rows):
            end = min(start + chunk_rows, rows)
            texts = [cell_texts(c.cells[start:end], c.text) for c in columns]
            yield "".join(map(_row, zip(*texts, strict=True))), end - start


def _row(cells: Sequence[str]) -> str:
    # csv.writer writes a row of one empty cell as "" (else it would be a blank line).
    if len(cells) == 1 and not cells[0]:
        return '""' + LINE_END
    return ",".join(cells) + LINE_END


def csv_lines(chunks: Iterable[Sequence[CsvColumn]]) -> Iterator[str]:
    """The CSV text of column chunks in pieces of about a thousand rows, for streaming."""
    for text, _rows in _pieces(chunks):
        yield text


def write_csv(
    chunks: Iterable[Sequence[CsvColumn]], out: BinaryIO, progress: Callable[[int], None] | None = None
) -> None:
    """Write column chunks to a binary stream; ``progress(rows written)`` after each piece."""
    written = 0
    for text, rows in _pieces(chunks):
        out.write(text.encode("utf-8"))
        written += rows
        if progress:
            progress(written)
