"""The self-contained HTML file of one detailed run (``wakeledger simulate``): the three
charts with Plotly's JavaScript inlined, so the file opens offline."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, BinaryIO

import plotly.io as pio
from markupsafe import Markup

import model
from app.errors import InvalidInput
from app.presentation.templates import render
from app.services.detailed_runs.figures import CHART_TITLES, run_facts, run_figures
from app.services.detailed_runs.lifecycle import RunParameters, step_problems
from app.services.files import write_atomically
from app.services.ingest import physics_problems
from model import envelope


def render_run_html(shot: Mapping[str, Any], doc: Mapping[str, Any]) -> str:
    """A self-contained HTML page of one run: the three charts with Plotly's JavaScript inlined (opens offline)."""
    figures = run_figures(doc)
    charts = []
    for i, (key, figure) in enumerate(figures.items()):
        div = pio.to_html(
            figure,
            include_plotlyjs=i == 0,
            full_html=False,
            validate=False,
            div_id=f"chart-{key}",
            default_height=f"{figure['layout'].get('height', 400)}px",
            config={"displaylogo": False, "responsive": True},
        )
        charts.append({"key": key, "title": CHART_TITLES[key], "html": Markup(div)})
    return render(
        "detailed_run_file.html",
        shot_id=str(shot.get("shot_id") or "unnamed shot"),
        charts=charts,
        facts=run_facts(doc),
        validity_note=doc.get("validity_note") or "",
        model_version=model.MODEL_VERSION,
        created=datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S UTC"),
    )


def simulate_to_html(
    shot: Mapping[str, Any],
    params: RunParameters,
    out: Path,
    progress: Callable[[float], None] | None = None,
    settings: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Run one shot (API JSON shape) and write its HTML file; returns the JSON result.

    Raises ShotInputError (every failing field of the shot) or InvalidInput (run parameters) before any work.
    """
    if not isinstance(shot, Mapping):
        raise model.ShotInputError([("body", "a shot must be a JSON object")])
    problems = physics_problems(shot)
    if problems:
        raise model.ShotInputError(problems)
    length = float(shot["plasma"]["length_m"])
    problems = step_problems(params, length)
    if problems:
        raise InvalidInput(problems)
    result = envelope.simulate_envelope(
        shot,
        settings,
        params.slices_per_wavelength,
        params.dz_m,
        progress=progress,
        stop_after_saturation_m=params.stop_after_saturation_m,
    )
    doc = envelope.envelope_result_to_json(result)
    html = render_run_html(shot, doc).encode("utf-8")

    def write(stream: BinaryIO) -> None:
        stream.write(html)

    write_atomically(out, write)
    return doc


def problem_lines(problems: Sequence[Mapping[str, str]] | Sequence[tuple[str, str]]) -> list[str]:
    """'field: reason' lines of (field, reason) problems or a problem document's errors."""
    lines = []
    for item in problems:
        field, reason = (item["field"], item["reason"]) if isinstance(item, Mapping) else item
        lines.append(f"{field}: {reason}")
    return lines
