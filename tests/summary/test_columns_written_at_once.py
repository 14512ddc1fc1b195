"""The exports write whole columns at once (numbers through orjson, instants through numpy); the
text must be exactly what the standard csv writer, ``repr``, ``format_utc`` and ``iso_text`` write
one cell at a time."""

from __future__ import annotations

import csv
import io
import math
import random
from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from app.presentation.csv_writer import CsvColumn, csv_lines, defuse, number_texts, write_csv
from app.times import format_utc, iso_text, local_texts, utc_texts


def awkward_floats(n: int, seed: int) -> np.ndarray:
    """n floats: the neighbours of repr's notation switches, then every magnitude and whole numbers."""
    rng = np.random.default_rng(seed)
    edges = []
    for edge in (1e-4, 1e16, 1e-5, 1e15, 1.0, 0.5, 5e-324, 1.7976931348623157e308):
        for direction in (0.0, math.inf):
            v = edge
            for _ in range(3):
                edges.append(v)
                v = float(np.nextafter(v, direction)) if v < 1e308 else v
    edges += [0.0, -0.0, 250.0, 7e14, 1.5e-07, 9999999999999998.0, 123456789012345680.0, 0.1, 1e22, 1e23]
    m = n - 2 * len(edges)
    values = 10.0 ** rng.uniform(-320, 308, m) * rng.choice([-1.0, 1.0], m)
    values[::5] = np.round(values[::5] * 1e-8)
    values[::7] = rng.integers(-(10**6), 10**6, values[::7].size).astype(float)
    return rng.permutation(np.concatenate([np.array(edges), -np.array(edges), values]))


@pytest.mark.parametrize("seed", range(4))
def test_a_column_of_numbers_reads_as_pythons_shortest_round_trip_text(seed):
    values = awkward_floats(20_000, seed)
    assert number_texts(values) == [repr(v) for v in values.tolist()]


def test_nan_and_infinity_are_empty_cells():
    assert number_texts(np.array([math.nan, math.inf, -math.inf, 2.0])) == ["", "", "", "2.0"]


def standard_csv(columns: list[CsvColumn]) -> str:
    """The convention cell by cell: csv.writer over the cells, floats NaN -> empty, text defused."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow([c.header for c in columns])
    cells = []
    for c in columns:
        values = c.cells.tolist() if isinstance(c.cells, np.ndarray) else list(c.cells)
        values = [None if isinstance(v, float) and not math.isfinite(v) else v for v in values]
        if c.text:
            values = [defuse(v) if isinstance(v, str) else v for v in values]
        cells.append(values)
    writer.writerows(zip(*cells, strict=True))
    return out.getvalue()


def awkward_texts(n: int, seed: int) -> list:
    rng = random.Random(seed)
    pieces = ["", "a", ",", '"', "\r\n", "\n", "\r", "=1+1", "+", "-3", "@x", "\t", " ", "é", "💡", ";", "'"]
    cells: list = []
    for _ in range(n):
        kind = rng.random()
        if kind < 0.1:
            cells.append(None)
        elif kind < 0.15:
            cells.append(rng.choice([-5, 7, 2.5, -0.0, True]))
        else:
            cells.append("".join(rng.choice(pieces) for _ in range(rng.randint(0, 4))))
    return cells


@pytest.mark.parametrize("seed", range(3))
def test_the_csv_is_what_the_standard_writer_writes_cell_by_cell(seed):
    n = 2500
    rng = np.random.default_rng(seed)
    columns = [
        CsvColumn("shot_id", [f"s-{i}" for i in range(n)], text=True),
        CsvColumn("note, with a comma", awkward_texts(n, seed), text=True),
        CsvColumn("not defused", awkward_texts(n, seed + 10)),
        CsvColumn("plasma_density_cm3 [cm^-3]", awkward_floats(n, seed)),
        CsvColumn("as a list", [None if i % 9 == 0 else float(v) for i, v in enumerate(awkward_floats(n, seed + 5))]),
        CsvColumn("count", rng.integers(-50, 50, n)),
        CsvColumn("revision", [int(v) for v in rng.integers(1, 4, n)]),
        CsvColumn("flag_codes", ["" if i % 3 else "WEAK_SEED:marginal;HOSING_RISK:outside" for i in range(n)]),
    ]
    expected = standard_csv(columns)
    buffer = io.BytesIO()
    write_csv([columns], buffer)
    assert buffer.getvalue().decode("utf-8") == expected
    assert "".join(csv_lines([columns])) == expected


def test_a_table_written_in_chunks_is_the_table_written_at_once():
    cells = awkward_floats(3000, 7)
    whole = [CsvColumn("x", cells), CsvColumn("t", awkward_texts(cells.size, 7), text=True)]
    parts = [[CsvColumn("x", cells[a : a + 700]), CsvColumn("t", whole[1].cells[a : a + 700], text=True)]
             for a in range(0, cells.size, 700)]  # fmt: skip
    assert "".join(csv_lines(parts)) == standard_csv(whole)


def test_a_one_column_row_with_an_empty_cell_is_written_as_two_quotes_as_the_standard_writer_does():
    columns = [CsvColumn("only", ["", "x", None])]
    assert "".join(csv_lines([columns])) == standard_csv(columns) == 'only\r\n""\r\nx\r\n""\r\n'


def moments(n: int, seed: int) -> list[datetime]:
    """Instants around daylight-saving changes and far from them, with and without fractions."""
    rng = random.Random(seed)
    start = datetime(2026, 3, 29, 0, 30, tzinfo=UTC)
    out = []
    for _ in range(n):
        moment = start + timedelta(seconds=rng.randint(-(10**8), 10**8))
        kind = rng.random()
        if kind < 0.3:
            moment = moment.replace(microsecond=rng.randint(0, 999_999))
        elif kind < 0.6:
            moment = moment.replace(microsecond=rng.randint(0, 999) * 1000)
        out.append(moment)
    return [*out, datetime(1990, 1, 1, tzinfo=UTC), datetime(2026, 3, 29, 1, tzinfo=UTC), datetime(2026, 1, 1, 12)]


def test_utc_columns_read_as_format_utc_writes_each_instant():
    every = moments(5000, 1)
    assert utc_texts(every) == [format_utc(m) for m in every]


@pytest.mark.parametrize(
    "zone", ["Europe/Zurich", "America/Chicago", "UTC", "Europe/London", "Asia/Kolkata", "Australia/Lord_Howe"]
)
def test_local_columns_read_as_iso_text_writes_each_instant_in_the_zone(zone):
    tz = ZoneInfo(zone)
    every = moments(3000, 2)
    expected = [iso_text((m if m.tzinfo else m.replace(tzinfo=UTC)).astimezone(tz)) for m in every]
    assert local_texts(every, tz) == expected


def test_an_old_local_mean_time_keeps_its_offset_with_seconds():
    tz = ZoneInfo("Europe/Amsterdam")
    old = [datetime(1900, 1, 1, tzinfo=UTC) + timedelta(days=i, microseconds=i) for i in range(5)]
    assert local_texts(old, tz) == [iso_text(m.astimezone(tz)) for m in old]
    assert local_texts(old, tz)[0] == "1900-01-01T00:19:32+00:19:32"
