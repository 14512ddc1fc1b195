"""The one CSV convention of every export (the dashboard's table download and the weekly
summary over the API and the CLI):

- one header row, then one row per shot; UTF-8, CRLF line ends (RFC 4180);
- headers follow the label rule of ``app.presentation.fields``: ``name [unit]``;
- instants are UTC, ISO 8601 with the ``Z`` offset (``app.times.format_utc``);
- numbers are unrounded (Python's shortest round-trip text), an empty cell is no value;
- lists in one cell (flags as ``CODE:severity``, tags) are joined by ``;``;
- a text cell that a spreadsheet would run as a formula (it starts with ``=``, ``+``,
  ``-``, ``@``, a tab or a carriage return) is written with a leading apostrophe.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, BinaryIO

LIST_SEPARATOR = ";"
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


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
    """A column of a CSV file: its header and its cells (None for an empty cell)."""

    header: str
    cells: list[Any]
    text: bool = False  # text cells are defused; numbers are written as they are


def _cells(column: CsvColumn) -> list[Any]:
    if not column.text:
        return column.cells
    return [defuse(c) if isinstance(c, str) else c for c in column.cells]


def _pieces(chunks: Iterable[Sequence[CsvColumn]], chunk_rows: int = 1000) -> Iterator[tuple[str, int]]:
    """(text, rows in it) of column chunks, the first chunk's headers as the header row."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    header_written = False
    for columns in chunks:
        if not header_written:
            writer.writerow([c.header for c in columns])
            header_written = True
        rows = list(zip(*(_cells(c) for c in columns), strict=False))
        for start in range(0, len(rows), chunk_rows):
            part = rows[start : start + chunk_rows]
            writer.writerows(part)
            yield buffer.getvalue(), len(part)
            buffer.seek(0)
            buffer.truncate()
    if buffer.getvalue():
        yield buffer.getvalue(), 0


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
