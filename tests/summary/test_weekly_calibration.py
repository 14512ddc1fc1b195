"""The weekly summary carries the week's model against measurement: the density scale with its
interval, the changes found, and the scaling exponents, in the JSON document, the Parquet
metadata and the HTML report."""

from __future__ import annotations

import io
import json
from datetime import UTC, datetime

import pyarrow.parquet as pq

from tests.support.calibration_shots import shots_from_columns, synthetic_columns


def test_the_week_carries_its_density_scale_changes_and_exponents_in_every_summary_format(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 300, scale=1.015, scale_after=1.03, step_at=150, seed=4)
    shots = shots_from_columns(columns, datetime(2026, 11, 17, 8, tzinfo=UTC), every_s=600)  # ISO week 2026-W47
    assert (
        client.post(
            f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers
        ).status_code
        == 201
    )
    url = f"/api/v1/campaigns/{campaign}/summary"
    document = client.get(url, params={"week": "2026-W47", "format": "json"}, headers=viewer_headers).json()
    check = document["summary"]["model_check"]
    assert check["density_scale"]["shots"] == 300
    assert check["density_scale"]["low"] < check["density_scale"]["estimate"] < check["density_scale"]["high"]
    assert len(check["changes"]) == 1 and abs(int(check["changes"][0]["shot_id"].split("-")[1]) - 150) <= 5
    assert {s["diagnostic"] for s in check["scaling"]} >= {"measured.halo_radius_mm", "measured.witness_energy_mev"}
    parquet = client.get(url, params={"week": "2026-W47", "format": "parquet"}, headers=viewer_headers).content
    metadata = pq.read_schema(io.BytesIO(parquet)).metadata
    assert json.loads(metadata[b"wakeledger.summary"])["model_check"] == check
    html = client.get(url, params={"week": "2026-W47", "format": "html"}, headers=viewer_headers).text
    assert "Model against measurement" in html and check["changes"][0]["shot_id"] in html


def test_the_weeks_model_check_is_the_calibration_answer_for_that_week_from_the_shots_the_summary_read(
    client, campaign, ingest_headers, admin_headers, viewer_headers, reference_cases
):
    """The summary does not read the week a second time for its model check: taken from the week's
    own table, it is the calibration answer over the same week (run tags, evaluations made stale by a
    settings change so that the model runs again, an excluded shot)."""
    columns = synthetic_columns(reference_cases[0]["input"], 240, scale=1.02, scale_after=1.035, step_at=120, seed=8)
    columns["plasma.gradient_pct_per_m"][160:] = 0.25  # with a gradient, c at another scale needs the model
    shots = shots_from_columns(columns, datetime(2026, 11, 17, 8, tzinfo=UTC), every_s=900)  # ISO week 2026-W47
    for i, shot in enumerate(shots):
        if i < 80:
            shot["daq"] = {"run": 7 + i // 40, "crew": "B"}
        elif i < 140:
            shot["run"] = "R-12"  # a top-level run tag
        elif i < 150:
            shot["daq"] = "not an object"
    for first in range(0, len(shots), 120):
        batch = {"shots": shots[first : first + 120]}
        posted = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json=batch, headers=ingest_headers)
        assert posted.status_code == 201, posted.text
    excluded = client.post(
        f"/api/v1/campaigns/{campaign}/shots/cal-00003/exclusion", json={"reason": "test shot"}, headers=ingest_headers
    )
    assert excluded.status_code in (200, 201), excluded.text
    changed = client.patch(f"/api/v1/campaigns/{campaign}/settings", json={"density_scale": 1.3}, headers=admin_headers)
    assert changed.status_code == 202, changed.text  # the re-evaluation is queued, not run: stale evaluations

    summary = client.get(
        f"/api/v1/campaigns/{campaign}/summary", params={"week": "2026-W47", "format": "json"}, headers=viewer_headers
    ).json()["summary"]
    week = {"from": summary["start_utc"], "to": summary["end_utc"]}
    answer = client.get(f"/api/v1/campaigns/{campaign}/calibration", params=week, headers=viewer_headers).json()
    check = summary["model_check"]
    assert answer["shots"] == 239 and answer["run_series_by"] == ["daq.run", "run"]
    for key in ("density_scale", "applied_density_scale", "frequency_mismatch_pct", "changes"):
        assert check[key] == answer[key], key
    assert check["applied_density_scale"] == 1.3 and check["changes"]
    assert check["scaling"] == [
        {key: s[key] for key in check["scaling"][0] if key != "outliers"} | {"outliers": len(s["outliers"])}
        for s in answer["scaling"]
    ]
