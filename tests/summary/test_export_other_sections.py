"""The exports keep the top-level sections a shot carried beside ours (a DAQ's ``daq``
block): extra columns in CSV and Parquet, fields in JSON, in the weekly files and in the
shot table's CSV download."""

from __future__ import annotations

import csv
import io
import json

import pyarrow as pa
import pyarrow.parquet as pq

SECTIONS = [
    {"daq": {"run": 71, "crate": "B", "cfg": {"gain": 2}}, "beamline": "test line 2"},
    {"daq": {"run": 72, "crate": "B", "armed": True}},
    {},  # a shot without any other section
]


def post_week(client, admin_headers, campaign, make_shot) -> None:
    shots = []
    for i, extra in enumerate(SECTIONS):
        shot = make_shot(i, shot_id=f"os-{i}", taken_at=f"2026-11-18T1{i}:00:00Z")
        shot.update(extra)
        shots.append(shot)
    answer = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=admin_headers)
    assert answer.status_code == 201, answer.text


def weekly(client, headers, campaign, fmt: str) -> bytes:
    answer = client.get(f"/api/v1/campaigns/{campaign}/summary?week=2026-W47&format={fmt}", headers=headers)
    assert answer.status_code == 200, answer.text
    return answer.content


def test_the_weekly_csv_and_the_shot_table_csv_keep_a_shots_other_sections_as_columns(
    client, admin_headers, viewer_headers, campaign, make_shot
):
    post_week(client, admin_headers, campaign, make_shot)
    table_csv = client.get(f"/campaigns/{campaign}/shots.csv", headers=viewer_headers)
    assert table_csv.status_code == 200, table_csv.text
    for body in (weekly(client, viewer_headers, campaign, "csv"), table_csv.content):
        rows = {r["shot_id"]: r for r in csv.DictReader(io.StringIO(body.decode("utf-8")))}
        header = list(next(iter(rows.values())))
        # After ours, first seen first; within a shot in key order (payloads are stored with sorted keys).
        assert header[-5:] == ["beamline", "daq.cfg", "daq.crate", "daq.run", "daq.armed"]
        assert rows["os-0"]["daq.run"] == "71" and rows["os-0"]["daq.cfg"] == '{"gain":2}'
        assert rows["os-0"]["beamline"] == "test line 2" and rows["os-0"]["daq.armed"] == ""
        assert rows["os-1"]["daq.armed"] == "true"
        assert all(rows["os-2"][c] == "" for c in ("daq.run", "daq.crate", "daq.cfg", "daq.armed", "beamline"))
        assert "flag_codes" in header and "flags" not in header


def test_the_weekly_parquet_keeps_other_sections_typed_and_marks_the_json_ones(
    client, admin_headers, viewer_headers, campaign, make_shot
):
    post_week(client, admin_headers, campaign, make_shot)
    table = pq.read_table(pa.BufferReader(weekly(client, viewer_headers, campaign, "parquet")))
    rows = {r["shot_id"]: r for r in table.to_pylist()}
    assert table.schema.field("daq.run").type == pa.int64()
    assert table.schema.field("daq.armed").type == pa.bool_()
    assert rows["os-0"]["daq.run"] == 71 and rows["os-1"]["daq.armed"] is True and rows["os-2"]["daq.run"] is None
    cfg = table.schema.field("daq.cfg")
    assert cfg.metadata == {b"encoding": b"json"}  # nested: JSON text, said so for an import
    assert json.loads(rows["os-0"]["daq.cfg"]) == {"gain": 2}
    assert rows["os-0"]["beamline"] == "test line 2"


def test_the_weekly_json_keeps_other_sections_verbatim(client, admin_headers, viewer_headers, campaign, make_shot):
    post_week(client, admin_headers, campaign, make_shot)
    shots = {s["shot_id"]: s for s in json.loads(weekly(client, viewer_headers, campaign, "json"))["shots"]}
    for i, extra in enumerate(SECTIONS):
        for key, value in extra.items():
            assert shots[f"os-{i}"][key] == value
    assert "daq" not in shots["os-2"]
