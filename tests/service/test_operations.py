"""Health check and Prometheus metrics."""

from __future__ import annotations

import re

SAMPLE = re.compile(
    r'^[a-zA-Z_:][a-zA-Z0-9_:]*(\{([a-zA-Z_][a-zA-Z0-9_]*="[^"]*",?)*\})? (-?[0-9.eE+-]+|\+Inf|-Inf|NaN)$'
)


def _sample(text: str, name: str) -> float:
    for line in text.splitlines():
        if line.startswith(name + " ") or line.startswith(name + "{"):
            return float(line.rsplit(" ", 1)[1])
    return 0.0


def test_the_health_check_answers_ok_without_a_token_when_the_database_answers(client):
    for path in ("/healthz", "/api/v1/healthz"):
        response = client.get(path)
        assert response.status_code == 200
        assert response.json() == {"status": "ok", "database": "ok"}


def test_metrics_are_in_the_prometheus_text_format_and_count_ingested_and_rejected_shots(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    before = client.get("/metrics", headers=viewer_headers).text
    client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(), headers=ingest_headers)
    client.post(
        f"/api/v1/campaigns/{campaign}/shots",
        json=make_shot(shot_id="bad", changes={"plasma.length_m": 0}),
        headers=ingest_headers,
    )
    response = client.get("/metrics", headers=viewer_headers)
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/plain; version=0.0.4")
    text = response.text
    for line in text.splitlines():
        assert line.startswith("# HELP ") or line.startswith("# TYPE ") or SAMPLE.match(line), line
    assert _sample(text, "wakeledger_shots_ingested_total") == _sample(before, "wakeledger_shots_ingested_total") + 1
    rejected = 'wakeledger_shots_rejected_total{reason="invalid"}'
    assert _sample(text, rejected) == _sample(before, rejected) + 1
    assert "# TYPE wakeledger_evaluation_seconds histogram" in text
    assert 'wakeledger_evaluation_seconds_bucket{mode="single",le="+Inf"}' in text
    assert "wakeledger_evaluation_seconds_sum{" in text and "wakeledger_evaluation_seconds_count{" in text


def test_metrics_need_a_viewer_token(client):
    assert client.get("/metrics").status_code == 401


def test_an_unknown_path_answers_a_404_problem(client):
    response = client.get("/api/v1/nothing-here")
    assert response.status_code == 404
    assert response.headers["content-type"].startswith("application/problem+json")
