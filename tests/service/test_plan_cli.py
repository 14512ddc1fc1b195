"""`wakeledger plan`: a shot file scanned over one or two fields into CSV, Parquet, JSON (the API's answer) or
one HTML file that opens offline; a campaign's settings and a stored shot from the database; clear errors."""

from __future__ import annotations

import csv
import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

import model
from app.advisory import ADVISORY_CAUTION
from app.cli import main
from model import plan
from tests.support.plans import failing, planned

DENSITY = "plasma.density_cm3=1e14:1e15:5:log"
SEED = "seed.position_mm=-70:140:4"


@pytest.fixture
def shot_file(tmp_path: Path, make_shot) -> Path:
    path = tmp_path / "planned.json"
    path.write_text(json.dumps(make_shot("ex-1", shot_id="tomorrow-1", changes={"driver.emittance_n_mm_mrad": 0.0})))
    return path


def run(tmp_path: Path, shot: Path, fmt: str, *args: str) -> tuple[int, Path]:
    out = tmp_path / "out" / f"plan.{fmt}"
    out.parent.mkdir(exist_ok=True)
    return main(["plan", str(shot), *args, "--out", str(out)]), out


def _scan(shot_file: Path, settings=None):
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 5, "spacing": "log"},
        {"field": "seed.position_mm", "start": -70.0, "stop": 140.0, "steps": 4},
    ]
    return plan.scan(json.loads(shot_file.read_text()), axes, settings)


def test_the_csv_has_one_row_per_grid_point_with_units_in_the_headers(tmp_path, shot_file, capsys):
    code, out = run(tmp_path, shot_file, "csv", "--vary", DENSITY, "--vary", SEED)
    assert code == 0, capsys.readouterr().err
    assert re.search(r"wrote .*plan\.csv: 5 \u00d7 4 points: ", capsys.readouterr().err)
    rows = list(csv.reader(out.open(newline="", encoding="utf-8")))
    header, body = rows[0], rows[1:]
    outputs = [f for f in model.OUTPUT_FIELDS if not f.measured_only]
    assert header == [
        "plasma_density_cm3 [cm^-3]",
        "seed_position_mm [mm]",
        "status",
        "flag_codes",
        *[f"{f.name} [{f.unit}]" if f.unit else f.name for f in outputs],
    ]
    expected = _scan(shot_file)
    assert len(body) == 20
    for cell, row in enumerate(body):
        i, j = divmod(cell, 4)  # row-major: the first axis varies slowest
        assert float(row[0]) == expected.axes[0].values[i] and float(row[1]) == expected.axes[1].values[j]
        assert row[2] == model.STATUSES[expected.status[cell]]
        fired = [
            f"{c}:{model.SEVERITY_BY_RANK[expected.flags[c][cell]]}"
            for c in model.FLAG_CODES
            if expected.flags[c][cell]
        ]
        assert row[3] == ";".join(fired)
        for f, text in zip(outputs, row[4:], strict=True):
            value = expected.outputs[f.name][cell]
            assert (text == "" and np.isnan(value)) or float(text) == value, f.name  # unrounded, empty for no value
    assert {r[header.index("waist_beta_m [m]")] for r in body} == {""}  # a cold beam has no waist beta


def test_the_parquet_file_keeps_units_in_the_field_metadata_and_the_plan_in_the_schema(tmp_path, shot_file):
    code, out = run(tmp_path, shot_file, "parquet", "--vary", DENSITY)
    assert code == 0
    table = pq.read_table(out)
    assert table.num_rows == 5 and table.column_names[:3] == ["plasma_density_cm3", "status", "flag_codes"]
    assert table.schema.field("plasma_density_cm3").metadata == {b"unit": b"cm^-3"}
    assert table.schema.field("efolds_exit").metadata == {b"unit": b"e-folds"}
    document = json.loads(table.schema.metadata[b"wakeledger.plan"])
    assert document["axes"] == [
        {"field": "plasma.density_cm3", "unit": "cm^-3", "start": 1e14, "stop": 1e15, "steps": 5, "spacing": "log"}
    ]
    assert document["model_version"] == model.MODEL_VERSION and document["caution"] == ADVISORY_CAUTION
    expected = plan.scan(json.loads(shot_file.read_text()), [document["axes"][0]])
    np.testing.assert_array_equal(table.column("efolds_exit").to_numpy(), expected.outputs["efolds_exit"])


def test_the_json_file_is_the_apis_answer_to_the_same_scan(tmp_path, shot_file, client, viewer_headers):
    code, out = run(tmp_path, shot_file, "json", "--vary", DENSITY, "--vary", SEED)
    assert code == 0
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 5, "spacing": "log"},
        {"field": "seed.position_mm", "start": -70, "stop": 140, "steps": 4},
    ]
    body = {"base": json.loads(shot_file.read_text()), "axes": axes}
    answer = client.post("/api/v1/plans/scan", json=body, headers=viewer_headers)
    assert json.loads(out.read_text()) == answer.json()


class _Loads(HTMLParser):
    """Every src and href attribute of the document's elements (script bodies are not markup)."""

    def __init__(self) -> None:
        super().__init__()
        self.found: list[tuple[str, str]] = []

    def handle_starttag(self, tag, attrs):
        self.found += [(tag, value or "") for name, value in attrs if name in ("src", "href")]


def _loads(text: str) -> list[tuple[str, str]]:
    parser = _Loads()
    parser.feed(text)
    return parser.found


def test_the_html_file_holds_the_map_and_the_tables_and_loads_nothing_from_anywhere(tmp_path, shot_file):
    code, out = run(tmp_path, shot_file, "html", "--vary", DENSITY, "--vary", SEED)
    assert code == 0
    text = out.read_text(encoding="utf-8")
    assert ADVISORY_CAUTION in html.unescape(text) and "Plan around tomorrow-1" in text
    assert 'id="chart-plan"' in text and 'id="plan-windows"' in text and 'id="plan-sensitivities"' in text
    assert 'id="plan-nearest"' in text
    # Plotly's JavaScript is inside the file, and no element of it loads anything (no src, no href).
    assert "plotly.js v" in text and "Plotly.newPlot" in text
    assert _loads(text) == []


def test_a_one_axis_html_file_draws_the_curves(tmp_path, shot_file):
    code, out = run(tmp_path, shot_file, "html", "--vary", "plasma.length_m=1:20:30")
    assert code == 0 and '"curve"' in out.read_text(encoding="utf-8")


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["--vary", "plasma.density_cm3=1e9:1e15:5:log"], "--vary plasma.density_cm3=1e9:1e15:5:log: start:"),
        (["--vary", "plasma.density_cm3=1e14:lots:5"], "stop: not a number"),
        (["--vary", "plasma.density_cm3"], "write FIELD=START:STOP:STEPS"),
        (["--vary", "plasma.colour=1:2:3"], "unknown input field"),
        (["--vary", DENSITY, "--vary", SEED, "--vary", "plasma.length_m=1:2:3"], "--vary: give one or two axes"),
    ],
)
def test_a_bad_axis_is_named_by_its_option_and_nothing_is_written(tmp_path, shot_file, capsys, args, words):
    code, out = run(tmp_path, shot_file, "csv", *args)
    assert code == 2
    assert words in capsys.readouterr().err
    assert not out.exists() and list(out.parent.iterdir()) == []


def test_a_bad_shot_file_or_output_name_is_refused(tmp_path, shot_file, make_shot, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(make_shot(changes={"plasma.density_cm3": -1})))
    assert run(tmp_path, bad, "csv", "--vary", DENSITY)[0] == 2
    assert "bad.json: plasma.density_cm3: out of range" in capsys.readouterr().err
    assert run(tmp_path, shot_file, "xlsx", "--vary", DENSITY)[0] == 2
    assert "csv, .parquet, .json, .html" in capsys.readouterr().err.replace(".csv", "csv")
    assert run(tmp_path, tmp_path / "absent.json", "csv", "--vary", DENSITY)[0] == 2


def test_a_campaign_plans_with_its_settings_and_a_stored_shot_is_read_from_the_database(
    tmp_path, database_url, client, campaign, admin_headers, make_shot, capsys
):
    shot = make_shot("ex-1", shot_id="stored-7")
    assert client.post(f"/api/v1/campaigns/{campaign}/shots", json=shot, headers=admin_headers).status_code == 201
    patch = client.patch(
        f"/api/v1/campaigns/{campaign}/settings", json=failing(shot, HOSING_RISK=0.5), headers=admin_headers
    )
    settings = patch.json()["campaign"]["effective_settings"]
    inline = tmp_path / "inline.json"
    inline.write_text(json.dumps(shot))
    reference = tmp_path / "reference.json"
    reference.write_text(json.dumps({"campaign": campaign, "shot_id": "stored-7"}))
    args = ["--database-url", database_url, "plan"]
    out_inline, out_stored = tmp_path / "inline-plan.json", tmp_path / "stored-plan.json"
    axis = "driver.sigma_r_mm=0.1:0.4:4"
    assert main([*args, str(inline), "--vary", axis, "--campaign", campaign, "--out", str(out_inline)]) == 0
    assert main([*args, str(reference), "--vary", axis, "--out", str(out_stored)]) == 0
    with_campaign, stored = json.loads(out_inline.read_text()), json.loads(out_stored.read_text())
    assert with_campaign["settings_version"] == stored["settings_version"] == 2
    assert stored["base"] == {"campaign": campaign, "shot_id": "stored-7", "revision": 1}
    assert with_campaign["status"] == stored["status"]
    for cell, sigma_r in enumerate(stored["axes"][0]["values"]):
        expected = model.evaluate_shot(planned(shot, {"driver.sigma_r_mm": sigma_r}), settings)
        assert stored["status"][cell] == expected["status"]
    capsys.readouterr()
    assert main([*args, str(inline), "--vary", axis, "--campaign", "nowhere", "--out", str(out_inline)]) == 1
    assert "campaign 'nowhere' does not exist" in capsys.readouterr().err
