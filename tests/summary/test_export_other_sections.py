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


def reference_records(table):
    """One dict per shot as the JSON writer built them before it wrote column by column: the reference
    its bytes are held to."""
    from app.plain import float_list
    from app.services.export_table import INPUT_PATHS, NOT_EVALUATED, _input_cells
    from app.store.exports import EVALUATION_OUTPUT_COLUMNS
    from app.times import utc_texts

    sections = {}
    for path in INPUT_PATHS:
        group, name = path.split(".", 1)
        sections.setdefault(group, []).append((name, _input_cells(table.inputs[path], path)))
    outputs = {name: float_list(table.outputs[name]) for name in EVALUATION_OUTPUT_COLUMNS}
    taken_at = utc_texts(table.taken_at)
    for i in range(len(table)):
        record = {
            "shot_id": table.shot_id[i],
            "taken_at": taken_at[i],
            "revision": table.revision[i],
            "notes": table.notes[i],
            "tags": table.tags[i],
        }
        for group, fields in sections.items():
            record[group] = {name: cells[i] for name, cells in fields}
        if table.status[i] == NOT_EVALUATED:
            record["evaluation"] = None
        else:
            evaluation = {name: outputs[name][i] for name in EVALUATION_OUTPUT_COLUMNS}
            evaluation |= {"status": table.status[i], "flags": table.flags.dicts[i]}
            evaluation |= {"model_version": table.model_version[i], "settings_version": table.settings_version[i]}
            record["evaluation"] = evaluation
        for key, value in table.extras[i].items():
            record.setdefault(key, value)
        yield record


def test_each_shots_json_is_the_record_the_encoder_writes_for_it_sections_named_like_our_keys_left_out(
    client, admin_headers, viewer_headers, campaign, make_shot
):
    """Written column by column, every shot's JSON is byte for byte what the encoder writes for its record:
    other sections of every kind (nested, lists, booleans, null, texts to escape), sections named like a
    key of ours ("revision", "evaluation": ours win), tags, notes with quotes and line breaks, a shot
    without a measured value; an integer beyond 64 bits (which orjson refuses) by the standard encoder."""
    import orjson

    from app.services.export_table import _object_json, record_json
    from app.services.weekly.summary import build_weekly_summary
    from app.store.campaigns import get_campaign
    from app.times import IsoWeek

    extras = [
        {"daq": {"run": 71, "cfg": {"gain": 2.5e-7, "on": [True, None]}}, "beamline": 'line "2" </script>'},
        {"revision": 99, "evaluation": "theirs", "zz": {"ünï": "\u2028\x1f"}},
        {},
        {"daq": {"counter": 2**62}},
    ]
    shots = []
    for i, extra in enumerate(extras):
        shot = make_shot(i % 3, shot_id=f"js-{i}", taken_at=f"2026-11-18T1{i}:00:00.25Z")
        shot.update(extra)
        shot["tags"] = [["scan", "a;b"], [], ["x"], ["scan", "a;b"]][i]
        shot["notes"] = 'first line\nsecond "quoted" line' if i % 2 else ""
        shot.get("measured", {}).pop("modulation_phase_rad", None)
        shots.append(shot)
    answer = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=admin_headers)
    assert answer.status_code == 201, answer.text

    with client.app.state.session_factory() as session:
        summary = build_weekly_summary(session, get_campaign(session, campaign), IsoWeek.parse("2026-W47"))
    table = summary.shots
    written = record_json(table, slice(0, len(table)))
    for text, record in zip(written, reference_records(table), strict=True):
        assert text == orjson.dumps(record)
    assert json.loads(_object_json({"counter": 2**70, "x": 0.5})) == {"counter": 2**70, "x": 0.5}  # beyond orjson
    document = json.loads(weekly(client, viewer_headers, campaign, "json"))
    assert [s["revision"] for s in document["shots"]] == [1, 1, 1, 1]
    assert document["shots"][1]["evaluation"] != "theirs" and document["shots"][1]["zz"] == extras[1]["zz"]
