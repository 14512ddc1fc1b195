"""``wakeledger plan``'s files: one scan as CSV, Parquet, JSON or one self-contained HTML file.

- csv: one row per grid point (row-major, the first axis slowest): the varied fields under their
  column names with units in the headers (``plasma_density_cm3 [cm^-3]``), ``status``,
  ``flag_codes`` (``CODE:severity`` entries) and every output, by the project's one CSV
  convention (``app.presentation.csv_writer``: numbers unrounded, an empty cell for no value);
- parquet: the same columns, the unit in each field's metadata, the plan (axes, base, versions,
  the caution) as JSON in the schema metadata under ``wakeledger.plan``;
- json: the answer of ``POST /api/v1/plans/scan`` for the same request;
- html: the map (or the curves), the base's status, nominal windows, nearest nominal shot and
  sensitivities in one file that opens offline: Plotly's JavaScript is inlined by
  ``plotly.io.to_html(include_plotlyjs=True)``, as the detailed-run file does, and the styles
  are in the page; it loads nothing from anywhere.

Every file is written through ``write_atomically``: never half-written.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import orjson
import plotly.io as pio
from markupsafe import Markup

import model
from app.advisory import ADVISORY_CAUTION
from app.errors import FieldProblem, InvalidInput
from app.plain import float_list
from app.presentation.csv_writer import CsvColumn, flag_text, write_csv
from app.presentation.fields import with_unit
from app.presentation.json_text import json_bytes
from app.presentation.templates import render
from app.services.files import write_atomically
from app.services.planner import answers, figures, page
from app.services.planner.answers import ResolvedBase
from model import plan

PLAN_FORMATS = ("csv", "parquet", "json", "html")
DOCUMENT_KIND = "wakeledger.plan_scan"
_VARY = re.compile(r"^(?P<field>[^=\s]+)=(?P<start>[^:]+):(?P<stop>[^:]+):(?P<steps>[^:]+)(?::(?P<spacing>[^:]*))?$")


def axis_from_text(text: str, i: int) -> dict[str, Any]:
    """``FIELD=START:STOP:STEPS[:log]`` as a scan axis (``--vary``); InvalidInput naming ``axes.i`` otherwise."""
    match = _VARY.match(text.strip())
    if match is None:
        raise InvalidInput([(f"axes.{i}", f"write FIELD=START:STOP:STEPS or FIELD=START:STOP:STEPS:log, got {text!r}")])
    problems: list[FieldProblem] = []
    numbers: dict[str, Any] = {}
    for part, kind in (("start", float), ("stop", float), ("steps", int)):
        try:
            numbers[part] = kind(match[part])
        except ValueError:
            problems.append((f"axes.{i}.{part}", f"not {'an integer' if kind is int else 'a number'}: {match[part]!r}"))
    spacing = match["spacing"]
    if spacing not in (None, "log", "linear"):
        problems.append((f"axes.{i}.spacing", f"the fourth part may only be 'log' (or 'linear'), got {spacing!r}"))
    if problems:
        raise InvalidInput(problems)
    return {"field": match["field"], **numbers, "spacing": spacing or "linear"}


def option_lines(problems: Sequence[FieldProblem], vary: Sequence[str], source: str) -> list[str]:
    """Problems in the command's words: ``--vary TEXT: start: ...``, ``SHOT.json: plasma.density_cm3: ...``."""
    lines = []
    for path, reason in problems:
        axis = re.fullmatch(r"axes\.(\d+)(?:\.(\w+))?", path)
        if axis is not None and int(axis[1]) < len(vary):
            part = f"{axis[2]}: " if axis[2] else ""
            lines.append(f"--vary {vary[int(axis[1])]}: {part}{reason}")
        elif path == "axes":
            lines.append(f"--vary: {reason}")
        elif path.startswith("base."):
            lines.append(f"{source}: {path[len('base.') :]}: {reason}")
        else:
            lines.append(f"{path}: {reason}")
    return lines


def point_values(result: plan.Scan) -> list[np.ndarray]:
    """The value of each axis at every grid point (row-major: the first axis slowest)."""
    if len(result.axes) == 1:
        return [result.axes[0].values]
    first, second = (a.values for a in result.axes)
    return [np.repeat(first, second.size), np.tile(second, first.size)]


def flag_cells(result: plan.Scan) -> list[str]:
    """The ``flag_codes`` cell of every point (``CODE:severity`` entries joined by the list separator)."""
    index, sets = answers.fired_flag_sets(result.flags)
    return np.array([flag_text(s) for s in sets], dtype=object)[index].tolist()


def csv_columns(result: plan.Scan) -> list[CsvColumn]:
    columns = [
        CsvColumn(with_unit(model.column_name(a.field), a.unit), float_list(v))
        for a, v in zip(result.axes, point_values(result), strict=True)
    ]
    columns += [CsvColumn("status", answers.status_text(result.status)), CsvColumn("flag_codes", flag_cells(result))]
    columns += [
        CsvColumn(with_unit(name, model.OUTPUTS_BY_NAME[name].unit), float_list(values))
        for name, values in result.outputs.items()
    ]
    return columns


def plan_document(base: ResolvedBase, axes: Sequence[Mapping[str, Any]], result: plan.Scan) -> dict[str, Any]:
    """What the file is of: the axes as asked, the grid's shape, the base and the versions, and the caution."""
    return {
        "kind": DOCUMENT_KIND,
        "axes": [
            {
                "field": a["field"],
                "unit": s.unit,
                "start": a["start"],
                "stop": a["stop"],
                "steps": a["steps"],
                "spacing": a.get("spacing", "linear"),
            }
            for a, s in zip(axes, result.axes, strict=True)
        ],
        "shape": list(result.shape),
        **base.provenance(),
        "caution": ADVISORY_CAUTION,
    }


def write_parquet(document: Mapping[str, Any], result: plan.Scan, out: BinaryIO) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    fields: list[Any] = []
    arrays: list[Any] = []

    def add(name: str, array: Any, unit: str = "") -> None:
        fields.append(pa.field(name, array.type, metadata={"unit": unit} if unit else None))
        arrays.append(array)

    for a, values in zip(result.axes, point_values(result), strict=True):
        add(model.column_name(a.field), pa.array(values, type=pa.float64()), a.unit)
    add("status", pa.array(answers.status_text(result.status), type=pa.string()))
    add("flag_codes", pa.array(flag_cells(result), type=pa.string()))
    for name, values in result.outputs.items():
        add(name, pa.array(values, type=pa.float64(), from_pandas=True), model.OUTPUTS_BY_NAME[name].unit)
    metadata = {"wakeledger.kind": DOCUMENT_KIND, "wakeledger.plan": json.dumps(document, allow_nan=False)}
    pq.write_table(pa.Table.from_arrays(arrays, schema=pa.schema(fields, metadata=metadata)), out, compression="zstd")


def _nearest_fields(base: ResolvedBase, result: plan.Scan) -> list[str]:
    """The positive fields among the scan's axes: what the file's nearest nominal shot varies."""
    positive = plan.positive_fields_set(base.shot)
    return [a.field for a in result.axes if a.field in positive]


def render_html(
    base: ResolvedBase, axes: Sequence[Mapping[str, Any]], result: plan.Scan, title: str, created: datetime
) -> str:
    """One self-contained HTML page of a scan and the base's panels (Plotly's JavaScript inlined)."""
    spacings = [str(a.get("spacing", "linear")) for a in axes]
    planned = plan.plan_base(base.shot)
    base_values = [float(planned.value(a.field)) for a in result.axes]
    figure = orjson.loads(json_bytes(figures.scan_figure(result, spacings, base_values)))
    chart = pio.to_html(
        figure,
        include_plotlyjs=True,
        full_html=False,
        validate=False,
        div_id="chart-plan",
        default_height=f"{figure['layout'].get('height', 560)}px",
        config={"displaylogo": False, "responsive": True},
    )
    vary = _nearest_fields(base, result)
    return render(
        "plan_file.html",
        title=title,
        chart=Markup(chart),
        summary=page.status_counts_text(result),
        axes=plan_document(base, axes, result)["axes"],
        base=base,
        evaluation=page.evaluation_view(answers.evaluate_point(base, {})),
        windows=page.window_rows(answers.windows(base)),
        nearest=page.nearest_view(base, vary),
        sensitivities=page.sensitivity_rows(answers.sensitivities(base)),
        model_version=model.MODEL_VERSION,
        created=created.strftime("%Y-%m-%d %H:%M:%S UTC"),
    )


def write_plan_file(
    base: ResolvedBase, axes: Sequence[Mapping[str, Any]], result: plan.Scan, fmt: str, path: Path, title: str
) -> Path:
    """Write one scan to ``path`` in ``fmt`` (one of PLAN_FORMATS), atomically."""
    writers: dict[str, Callable[[BinaryIO], Any]] = {
        "csv": lambda out: write_csv([csv_columns(result)], out),
        "parquet": lambda out: write_parquet(plan_document(base, axes, result), result, out),
        "json": lambda out: out.writelines(answers.scan_answer(base, result)),
        "html": lambda out: out.write(render_html(base, axes, result, title, datetime.now(UTC)).encode("utf-8")),
    }
    if fmt not in writers:
        raise ValueError(f"unknown plan format {fmt!r}; choose one of {', '.join(PLAN_FORMATS)}")
    return write_atomically(path, writers[fmt])
