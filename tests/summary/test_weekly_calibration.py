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
