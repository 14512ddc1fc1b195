"""`wakeledger import`: a backlog of shots from CSV, Parquet, JSON lines or HDF5 into a
campaign, checked by the ingest service, idempotent, conflicts reported, and a weekly
export of one campaign imported into another unchanged."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from sqlalchemy import func, select

import model
from app.cli import main
from app.database import make_engine, make_session_factory
from app.services.export_table import INPUT_PATHS, other_sections
from app.tables import Campaign, Shot, ShotRevision

INPUT_COLUMNS = [model.column_name(p) for p in INPUT_PATHS]
WEEK = "2026-W47"


@pytest.fixture
def campaigns(client, admin_headers) -> tuple[str, str]:
    for slug in ("line-a", "line-b"):
        answer = client.post(
            "/api/v1/campaigns", json={"slug": slug, "name": slug, "timezone": "Europe/Zurich"}, headers=admin_headers
        )
        assert answer.status_code == 201, answer.text
    return "line-a", "line-b"


@pytest.fixture
def backlog(make_shot) -> list[dict[str, Any]]:
    """Twelve shots of week 2026-W47 with tags, notes a spreadsheet would run, measured
    values and other sections of every kind."""
    shots = []
    for i in range(12):
        shot = make_shot(i % 5, shot_id=f"bk-{i:03d}", taken_at=f"2026-11-1{7 + i % 3}T0{i % 10}:15:0{i % 7}.25Z")
        shot["daq"] = {
            "run": 700 + i,
            "operator": "night crew",
            "cfg": {"gain": i, "chan": [1, 2]},
            "armed": i % 2 == 0,
        }
        if i % 3 == 0:
            shot["beamline"] = "test line 2"
            shot["tags"] = ["-3dB", "scan"]
            shot["notes"] = "=not a formula, with a comma"
        if i % 4 == 0:
            shot.setdefault("measured", {})["modulation_freq_ghz"] = 150.0 + i
        shots.append(shot)
    return shots


def run(database_url: str, *args: str) -> int:
    return main(["--database-url", database_url, *args])


def post(client, headers, slug: str, shots: list[dict[str, Any]]) -> None:
    answer = client.post(f"/api/v1/campaigns/{slug}/shots/batch", json={"shots": shots}, headers=headers)
    assert answer.status_code in (200, 201), answer.text


def stored(database_url: str, slug: str) -> dict[str, dict[str, Any]]:
    """What a campaign holds of each shot: inputs, tags, notes, taken_at, other sections, revision."""
    engine = make_engine(database_url)
    try:
        with make_session_factory(engine)() as session:
            campaign_id = session.scalar(select(Campaign.id).where(Campaign.slug == slug))
            out = {}
            for shot in session.scalars(select(Shot).where(Shot.campaign_id == campaign_id)):
                out[shot.shot_id] = {
                    "inputs": {c: getattr(shot, c) for c in INPUT_COLUMNS},
                    "tags": list(shot.tags or []),
                    "notes": shot.notes,
                    "taken_at": shot.taken_at.replace(tzinfo=None),
                    "other": other_sections(shot.raw_payload),
                    "revision": shot.revision,
                }
            return out
    finally:
        engine.dispose()


def revision_count(database_url: str) -> int:
    engine = make_engine(database_url)
    try:
        with make_session_factory(engine)() as session:
            return session.scalar(select(func.count()).select_from(ShotRevision))
    finally:
        engine.dispose()


def write_jsonl(path: Path, shots: list[dict[str, Any]]) -> Path:
    path.write_text("".join(json.dumps(s) + "\n" for s in shots), encoding="utf-8")
    return path


def flat(shot: dict[str, Any]) -> dict[str, Any]:
    """A shot as our export's columns: inputs by column name, other sections dotted."""
    row = {"shot_id": shot["shot_id"], "taken_at": shot["taken_at"]}
    for key, value in shot.items():
        if isinstance(value, dict):
            for sub, cell in value.items():
                row[model.column_name(f"{key}.{sub}") if key in model.SECTIONS else f"{key}.{sub}"] = cell
        elif key not in row:
            row[key] = value
    return row


def plain_shots(make_shot, n: int = 6) -> list[dict[str, Any]]:
    """Shots that every format carries the same way: numbers, text and a numbered run."""
    shots = []
    for i in range(n):
        shot = make_shot(i % 5, shot_id=f"f-{i:03d}", taken_at=f"2026-11-18T1{i}:00:00Z")
        shot["daq"] = {"run": 100 + i}
        shots.append(shot)
    return shots


def write_format(fmt: str, path: Path, shots: list[dict[str, Any]]) -> Path:
    rows = [flat(s) for s in shots]
    columns = list(dict.fromkeys(k for r in rows for k in r))
    cells = {c: [r.get(c) for r in rows] for c in columns}
    if fmt == "csv":
        path = path.with_suffix(".csv")
        with path.open("w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(columns)
            writer.writerows([["" if r.get(c) is None else r.get(c) for c in columns] for r in rows])
    elif fmt == "jsonl":
        write_jsonl(path := path.with_suffix(".jsonl"), shots)
    elif fmt == "parquet":
        pq.write_table(pa.table(cells), path := path.with_suffix(".parquet"))
    elif fmt == "hdf5-datasets":  # one dataset per field, grouped by section: /plasma/density_cm3
        with h5py.File(path := path.with_suffix(".h5"), "w") as f:
            for shot_key in ("shot_id", "taken_at"):
                f.create_dataset(shot_key, data=[s[shot_key] for s in shots], dtype=h5py.string_dtype())
            for p in INPUT_PATHS + ("daq.run",):
                section, name = p.split(".")
                values = [s.get(section, {}).get(name) for s in shots]
                if all(v is None for v in values):
                    continue
                if any(isinstance(v, str) for v in values):
                    f.create_dataset(f"{section}/{name}", data=[v or "" for v in values], dtype=h5py.string_dtype())
                else:
                    f.create_dataset(f"{section}/{name}", data=np.array(values, dtype=float))
    elif fmt == "hdf5-table":  # one compound dataset, fields named by column
        fields, data = [], []
        for c in columns:
            values = cells[c]
            if any(isinstance(v, str) for v in values):
                fields.append((c, h5py.string_dtype()))
                data.append([v or "" for v in values])
            else:
                fields.append((c, "f8"))
                data.append([np.nan if v is None else v for v in values])
        table = np.empty(len(rows), dtype=fields)
        for (c, _), values in zip(fields, data, strict=True):
            table[c] = values
        with h5py.File(path := path.with_suffix(".h5"), "w") as f:
            f.create_dataset("runs/shots", data=table)
    return path


@pytest.mark.parametrize("fmt", ["csv", "jsonl", "parquet", "hdf5-datasets", "hdf5-table"])
def test_each_format_imports_the_same_shots_as_posting_them(
    database_url, client, admin_headers, campaigns, make_shot, tmp_path, capsys, fmt
):
    shots = plain_shots(make_shot)
    post(client, admin_headers, "line-a", shots)
    path = write_format(fmt, tmp_path / "backlog", shots)
    assert run(database_url, "import", "--campaign", "line-b", str(path)) == 0
    assert "line-b: stored 6, unchanged 0, conflicts 0, failed 0 (of 6 rows)" in capsys.readouterr().out
    posted, imported = stored(database_url, "line-a"), stored(database_url, "line-b")
    assert sorted(imported) == sorted(posted)
    for shot_id, shot in posted.items():
        assert imported[shot_id]["inputs"] == shot["inputs"], shot_id
        assert imported[shot_id]["taken_at"] == shot["taken_at"]
        assert imported[shot_id]["other"] == {"daq": {"run": shot["other"]["daq"]["run"]}}


@pytest.mark.parametrize("fmt", ["csv", "parquet", "json"])
def test_a_weekly_export_imports_into_another_campaign_unchanged(
    database_url, client, admin_headers, campaigns, backlog, tmp_path, capsys, fmt
):
    post(client, admin_headers, "line-a", backlog)
    out = tmp_path / f"week.{fmt}"
    assert run(database_url, "export", "--campaign", "line-a", "--week", WEEK, "--out", str(out)) == 0
    assert run(database_url, "import", "--campaign", "line-b", str(out)) == 0
    printed = capsys.readouterr().out
    assert "line-b: stored 12, unchanged 0, conflicts 0, failed 0 (of 12 rows)" in printed
    assert ("evaluation" if fmt == "json" else "flag_codes, model_version") in printed  # named as ignored
    a, b = stored(database_url, "line-a"), stored(database_url, "line-b")
    assert sorted(a) == sorted(b) == sorted(s["shot_id"] for s in backlog)
    for shot_id in a:
        for part in ("inputs", "tags", "notes", "taken_at", "other"):
            assert b[shot_id][part] == a[shot_id][part], (shot_id, part)
    assert b["bk-000"]["notes"] == "=not a formula, with a comma"
    assert b["bk-000"]["tags"] == ["-3dB", "scan"]
    assert b["bk-003"]["other"]["daq"] == {
        "run": 703,
        "operator": "night crew",
        "cfg": {"gain": 3, "chan": [1, 2]},
        "armed": False,
    }
    # importing the export again changes nothing, in either campaign (the export writes
    # the defaults a shot took; a left-out field and its default written out are the same)
    for slug in ("line-b", "line-a"):
        assert run(database_url, "import", "--campaign", slug, str(out)) == 0
        assert f"{slug}: stored 0, unchanged 12, conflicts 0, failed 0" in capsys.readouterr().out
    assert stored(database_url, "line-a") == a


def test_a_dry_run_lists_every_failing_row_with_its_field_and_stores_nothing(
    database_url, campaigns, make_shot, tmp_path, capsys
):
    shots = plain_shots(make_shot, 5)
    shots[1]["plasma"]["density_cm3"] = -4e14
    shots[3]["taken_at"] = "yesterday"
    shots[3]["driver"]["sigma_z_mm"] = "long"
    shots[4]["shot_id"] = ""  # an empty cell
    path = write_format("csv", tmp_path / "bad", shots)
    assert run(database_url, "import", "--campaign", "line-b", "--dry-run", str(path)) == 1
    out = capsys.readouterr().out.splitlines()
    failing = [line for line in out if line.startswith("row ")]
    assert [line.split(":")[0] for line in failing] == ["row 2", "row 4", "row 4", "row 5"]
    assert failing[0].startswith("row 2: plasma.density_cm3 (column 'plasma_density_cm3'): ")
    assert any(line.startswith("row 4: taken_at: ") for line in failing)
    assert any(line.startswith("row 4: driver.sigma_z_mm (column 'driver_sigma_z_mm'): ") for line in failing)
    assert failing[-1].startswith("row 5: shot_id")
    assert out[-1] == "dry run, nothing stored: would store 2, unchanged 0, conflicts 0, failed 3 (of 5 rows)"
    assert stored(database_url, "line-b") == {}


def test_a_dry_run_past_the_ingest_problem_cap_still_lists_every_failing_row(
    database_url, campaigns, make_shot, tmp_path, capsys
):
    shots = [make_shot(0, shot_id=f"neg-{i:03d}", taken_at="2026-11-18T10:00:00Z") for i in range(150)]
    for shot in shots:
        shot["plasma"]["density_cm3"] = -1.0
        shot["plasma"]["length_m"] = -1.0
    assert (
        run(database_url, "import", "--campaign", "line-b", "--dry-run", str(write_jsonl(tmp_path / "n.jsonl", shots)))
        == 1
    )
    out = capsys.readouterr().out.splitlines()
    assert sorted({int(line.split(":")[0][4:]) for line in out if line.startswith("row ")}) == list(range(1, 151))
    assert out[-1].endswith("failed 150 (of 150 rows)")


def test_a_rerun_is_idempotent_and_prints_the_progress_bar(database_url, campaigns, make_shot, tmp_path, capsys):
    shots = [
        make_shot(i % 5, shot_id=f"r-{i:04d}", taken_at=f"2026-11-18T10:{i // 60 % 60:02d}:{i % 60:02d}Z")
        for i in range(1200)
    ]
    path = write_jsonl(tmp_path / "many.jsonl", shots)
    assert run(database_url, "import", "--campaign", "line-b", "--batch-size", "500", str(path)) == 0
    first = capsys.readouterr()
    assert "line-b: stored 1200, unchanged 0, conflicts 0, failed 0 (of 1200 rows)" in first.out
    assert "100% 1200/1200 rows" in first.err
    revisions = revision_count(database_url)
    assert run(database_url, "import", "--campaign", "line-b", str(path)) == 0
    assert "line-b: stored 0, unchanged 1200, conflicts 0, failed 0 (of 1200 rows)" in capsys.readouterr().out
    assert revision_count(database_url) == revisions == 1200
    assert {s["revision"] for s in stored(database_url, "line-b").values()} == {1}


def test_a_changed_row_is_reported_as_a_conflict_and_nothing_is_overwritten(
    database_url, campaigns, make_shot, tmp_path, capsys
):
    shots = plain_shots(make_shot, 4)
    assert run(database_url, "import", "--campaign", "line-b", str(write_jsonl(tmp_path / "a.jsonl", shots))) == 0
    before = stored(database_url, "line-b")
    shots[2]["plasma"]["density_cm3"] *= 1.01
    shots.append(dict(shots[0], notes="same id, other notes"))  # row 5 repeats row 1's id
    capsys.readouterr()
    assert run(database_url, "import", "--campaign", "line-b", str(write_jsonl(tmp_path / "b.jsonl", shots))) == 1
    out = capsys.readouterr().out.splitlines()
    assert (
        "row 3: conflict: shot 'f-002' differs from the stored shot in plasma.density_cm3; nothing overwritten" in out
    )
    assert "row 5: conflict: shot 'f-000' differs from row 1 in notes; nothing overwritten" in out
    assert out[-1] == "line-b: stored 0, unchanged 3, conflicts 2, failed 0 (of 5 rows)"
    assert stored(database_url, "line-b") == before


def test_a_map_file_renames_a_foreign_files_columns(database_url, campaigns, make_shot, tmp_path, capsys):
    shots = plain_shots(make_shot, 3)
    every = dict.fromkeys(c for s in shots for c in flat(s))
    names = [c for c in every if c not in ("shot_id", "taken_at", "plasma_density_cm3")]
    path = tmp_path / "logbook.csv"
    with path.open("w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["Shot", "Time (UTC)", "ne [cm-3]", "operator", *names])
        for s in shots:
            row = flat(s)
            writer.writerow(
                [
                    s["shot_id"],
                    s["taken_at"],
                    s["plasma"]["density_cm3"],
                    "A. Nonymous",
                    *(row.get(n, "") for n in names),
                ]
            )
    mapping = tmp_path / "map.toml"
    mapping.write_text(
        'ignore = ["operator"]\n[columns]\nShot = "shot_id"\n"Time (UTC)" = "taken_at"\nne = "plasma.density_cm3"\n'
    )
    assert run(database_url, "import", "--campaign", "line-b", "--map", str(mapping), str(path)) == 0
    assert "line-b: stored 3, unchanged 0, conflicts 0, failed 0 (of 3 rows)" in capsys.readouterr().out
    imported = stored(database_url, "line-b")
    assert imported["f-001"]["inputs"]["plasma_density_cm3"] == shots[1]["plasma"]["density_cm3"]
    assert imported["f-001"]["other"] == {"daq": {"run": 101}}


def test_a_map_naming_a_field_that_does_not_exist_is_refused_with_a_suggestion(
    database_url, campaigns, make_shot, tmp_path, capsys
):
    path = write_format("csv", tmp_path / "x", plain_shots(make_shot, 1))
    mapping = tmp_path / "map.json"
    mapping.write_text(json.dumps({"columns": {"plasma_density_cm3": "plasma.densty_cm3"}}))
    assert run(database_url, "import", "--campaign", "line-b", "--map", str(mapping), str(path)) == 2
    err = capsys.readouterr().err
    assert "'plasma.densty_cm3' is no field of the model; did you mean 'plasma.density_cm3'?" in err
    assert stored(database_url, "line-b") == {}


def test_a_misspelt_column_fails_every_row_naming_the_field_it_meant(
    database_url, campaigns, make_shot, tmp_path, capsys
):
    shots = plain_shots(make_shot, 2)
    for s in shots:
        s["plasma"]["densty_cm3"] = s["plasma"].pop("density_cm3")
    path = write_format("csv", tmp_path / "typo", shots)
    assert run(database_url, "import", "--campaign", "line-b", str(path)) == 1
    out = capsys.readouterr().out
    assert (
        "row 1: plasma.densty_cm3 (column 'plasma_densty_cm3'): "
        "unknown field of plasma; did you mean plasma.density_cm3?" in out
    )
    assert "stored 0, unchanged 0, conflicts 0, failed 2 (of 2 rows)" in out


def test_an_unknown_campaign_or_unreadable_file_is_one_clear_line(database_url, campaigns, tmp_path, capsys):
    path = tmp_path / "s.csv"
    path.write_text("shot_id,taken_at\n")
    assert run(database_url, "import", "--campaign", "nope", str(path)) == 1
    assert "wakeledger import: error: campaign 'nope' does not exist" in capsys.readouterr().err
    (tmp_path / "s.txt").write_text("x")
    assert run(database_url, "import", "--campaign", "line-b", str(tmp_path / "s.txt")) == 2
    assert "give --format" in capsys.readouterr().err
    path.write_text("id,when\n1,2\n")
    assert run(database_url, "import", "--campaign", "line-b", str(path)) == 2
    assert "no column gives shot_id" in capsys.readouterr().err


def test_an_hdf5_file_with_several_tables_asks_which_one(database_url, campaigns, make_shot, tmp_path, capsys):
    path = write_format("hdf5-table", tmp_path / "runs", plain_shots(make_shot, 2))
    with h5py.File(path, "a") as f:
        f.create_dataset("calibration/points", data=np.zeros(4, dtype=[("x", "f8"), ("y", "f8")]))
    assert run(database_url, "import", "--campaign", "line-b", str(path)) == 2
    assert (
        "holds several tables ('calibration/points', 'runs/shots'); choose one with --table" in capsys.readouterr().err
    )
    assert run(database_url, "import", "--campaign", "line-b", "--table", "runs/shots", str(path)) == 0
    assert "line-b: stored 2" in capsys.readouterr().out
