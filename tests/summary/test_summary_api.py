"""GET /api/v1/campaigns/{slug}/summary: auth, formats, file names and week errors.
The shots here go in through the ingest API, so the real model evaluated them."""

from __future__ import annotations

import csv
import io
import json

import pyarrow.parquet as pq
import pytest

URL = "/api/v1/campaigns/test-campaign/summary"


@pytest.fixture
def ingested_week(client, campaign, ingest_headers, make_shot):
    """Nine shots on Tuesday to Thursday of 2026-W47 (three per worked example) and one in W46."""
    shots = [
        make_shot(case=i % 3, shot_id=f"w47-{i:03d}", taken_at=f"2026-11-{17 + i // 3}T10:{i:02d}:00Z")
        for i in range(9)
    ]
    shots.append(make_shot(case=0, shot_id="w46-000", taken_at="2026-11-12T08:00:00Z"))
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 201, response.text
    return shots


def test_the_summary_needs_a_token_and_answers_401_without_one(client, campaign):
    response = client.get(URL, params={"week": "2026-W47", "format": "csv"})
    assert response.status_code == 401
    assert response.headers["content-type"].startswith("application/problem+json")


def test_a_wrong_token_is_refused(client, campaign):
    response = client.get(URL, params={"week": "2026-W47"}, headers={"Authorization": "Bearer wlt_nonsense"})
    assert response.status_code == 401


def test_a_viewer_downloads_the_csv_with_a_sensible_file_name(client, ingested_week, viewer_headers):
    response = client.get(URL, params={"week": "2026-W47", "format": "csv"}, headers=viewer_headers)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"].startswith("text/csv")
    assert response.headers["content-disposition"] == 'attachment; filename="wakeledger-test-campaign-2026-W47.csv"'
    rows = list(csv.DictReader(io.StringIO(response.text)))
    assert sorted(r["shot_id"] for r in rows) == [f"w47-{i:03d}" for i in range(9)]
    assert all(r["status"] in ("nominal", "marginal", "outside") for r in rows)


def test_the_json_summary_counts_the_model_evaluated_shots_and_compares_with_the_week_before(
    client, ingested_week, viewer_headers
):
    response = client.get(URL, params={"week": "2026-W47", "format": "json"}, headers=viewer_headers)
    assert response.status_code == 200
    doc = response.json()
    summary = doc["summary"]
    assert summary["shot_count"] == 9 and sum(summary["status_counts"].values()) == 9
    listed = client.get(
        "/api/v1/campaigns/test-campaign/shots",
        params={"from": "2026-11-16T00:00:00Z", "to": "2026-11-23T00:00:00Z", "limit": 100},
        headers=viewer_headers,
    ).json()
    statuses = [s["evaluation"]["status"] for s in listed["items"]]
    for status in ("nominal", "marginal", "outside"):
        assert summary["status_counts"][status] == statuses.count(status)
    assert summary["previous_week"]["week"] == "2026-W46"
    assert summary["previous_week"]["shot_count"] == 1
    assert summary["previous_week"]["delta"]["shot_count"] == 8
    flagged = {s["shot_id"] for s in summary["flagged_shots"]}
    assert flagged == {s["shot_id"] for s in doc["shots"] if s["evaluation"]["status"] != "nominal"}
    assert all(r["message"] for s in summary["flagged_shots"] for r in s["reasons"])


@pytest.mark.parametrize(
    ("fmt", "media", "disposition"),
    [
        ("html", "text/html", "inline"),
        ("parquet", "application/vnd.apache.parquet", "attachment"),
    ],
)
def test_html_opens_inline_and_parquet_downloads(client, ingested_week, viewer_headers, fmt, media, disposition):
    response = client.get(URL, params={"week": "2026-W47", "format": fmt}, headers=viewer_headers)
    assert response.status_code == 200
    assert response.headers["content-type"].startswith(media)
    assert (
        response.headers["content-disposition"] == f'{disposition}; filename="wakeledger-test-campaign-2026-W47.{fmt}"'
    )
    if fmt == "parquet":
        assert pq.read_table(io.BytesIO(response.content)).num_rows == 9
    else:
        assert "2026-W47" in response.text and "<script" not in response.text


@pytest.mark.parametrize("week", ["2026-W54", "2026-47", "W00", "2026-W00", "next"])
def test_a_malformed_week_gets_422_problem_details_naming_the_week_parameter(client, campaign, viewer_headers, week):
    response = client.get(URL, params={"week": week}, headers=viewer_headers)
    assert response.status_code == 422
    assert response.headers["content-type"].startswith("application/problem+json")
    problem = response.json()
    assert [e["field"] for e in problem["errors"]] == ["week"]
    assert "YYYY-Www" in problem["errors"][0]["reason"] or "does not exist" in problem["errors"][0]["reason"]


def test_an_unknown_format_gets_422_naming_the_format_parameter(client, campaign, viewer_headers):
    response = client.get(URL, params={"week": "2026-W47", "format": "xlsx"}, headers=viewer_headers)
    assert response.status_code == 422
    assert [e["field"] for e in response.json()["errors"]] == ["format"]


def test_an_unknown_campaign_gets_404(client, viewer_headers):
    response = client.get("/api/v1/campaigns/no-such/summary", params={"week": "2026-W47"}, headers=viewer_headers)
    assert response.status_code == 404


def test_an_empty_week_is_a_valid_summary(client, campaign, viewer_headers):
    response = client.get(URL, params={"week": "2026-W10", "format": "json"}, headers=viewer_headers)
    assert response.status_code == 200
    assert response.json()["summary"]["empty"] is True and response.json()["shots"] == []


def test_without_a_week_the_current_week_of_the_campaign_is_summarised(client, campaign, viewer_headers):
    response = client.get(URL, headers=viewer_headers)
    assert response.status_code == 200
    week = json.loads(response.content)["summary"]["week"]
    assert week in response.headers["content-disposition"]
