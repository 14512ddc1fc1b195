"""The calibration page's figures: scatters that draw at most SCATTER_POINTS shots evenly in time (and
every shot not explained) while the statistics use every shot, saying so on the chart; the scale per
run beside the scale per day where the shots carry run tags; axis titles broken into lines."""

from __future__ import annotations

import html
import json
import re
from datetime import UTC, datetime

from app.presentation.charts import title_lines
from app.services.dashboard import calibration_page
from tests.support.calibration_shots import shots_from_columns, synthetic_columns
from tests.support.sessions import sign_in

START = datetime(2026, 11, 16, 8, tzinfo=UTC)


def _figures(text: str) -> dict[str, dict]:
    blocks = re.findall(r'<script type="application/json" data-chart="([^"]+)">(.*?)</script>', text, re.S)
    return {name: json.loads(body) for name, body in blocks}


def _page(client, campaign, ingest_headers, admin_token, shots) -> str:
    for i in range(0, len(shots), 500):
        response = client.post(
            f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots[i : i + 500]}, headers=ingest_headers
        )
        assert response.status_code == 201, response.text
    sign_in(client, admin_token)
    page = client.get(f"/campaigns/{campaign}/calibration")
    assert page.status_code == 200
    return page.text


def test_a_scatter_draws_at_most_its_cap_of_shots_and_every_odd_one_and_says_it_is_thinned(
    client, campaign, ingest_headers, admin_token, reference_cases, monkeypatch
):
    monkeypatch.setattr(calibration_page, "SCATTER_POINTS", 50)
    columns = synthetic_columns(reference_cases[0]["input"], 200, scale=1.02, seed=41)
    columns["measured.halo_radius_mm"][[13, 170]] *= 2.5
    text = _page(client, campaign, ingest_headers, admin_token, shots_from_columns(columns, START))
    halo = _figures(text)["chart-scaling-1"]
    shots, _fit, odd = halo["data"]
    assert len(shots["x"]) == 50 and shots["name"] == "shots: 50 of 200 drawn, evenly in time"
    assert shots["customdata"][0] == "cal-00000" and shots["customdata"][-1] == "cal-00199"  # spread over the period
    assert {"cal-00013", "cal-00170"} <= set(odd["customdata"])  # the odd shots are always drawn
    assert "<dd>200 (fit on 200)</dd>" in text  # the statistics use every shot
    phase = _figures(text)["chart-scaling-3"]  # one point per day: nothing to thin
    assert phase["data"][0]["name"] == "days"


def test_the_scale_series_draws_the_runs_beside_the_days_where_the_shots_carry_run_tags(
    client, campaign, ingest_headers, admin_token, reference_cases, monkeypatch
):
    monkeypatch.setattr(calibration_page, "SCATTER_POINTS", 2)
    columns = synthetic_columns(reference_cases[0]["input"], 90, scale=1.02, seed=42)
    shots = shots_from_columns(columns, START)
    for i, shot in enumerate(shots):
        shot["daq"] = {"run": f"<r{i // 30}>"}
    text = _page(client, campaign, ingest_headers, admin_token, shots)
    series = _figures(text)["chart-calib-series"]
    runs, days = series["data"][0], series["data"][1]  # the runs are drawn first, under the days
    assert days["name"] == "per day (95 % interval)" and days["x"] == ["2026-11-16 12:00:00"]
    assert runs["name"] == "per run, by daq.run (95 % interval); 2 of 3 runs drawn, evenly in time"
    assert runs["hovertext"][0].startswith("run &lt;r0&gt;: ")  # run labels are escaped for Plotly
    assert runs["x"][0] == "2026-11-16 08:14:30"  # the middle of the run, campaign time (UTC here)
    assert series["layout"]["xaxis"]["type"] == "date"
    assert "per day (1 days) and per run by daq.run (3 runs)" in html.unescape(text)


def test_without_run_tags_the_series_draws_the_days_only(
    client, campaign, ingest_headers, admin_token, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 60, scale=1.02, seed=43)
    text = _page(client, campaign, ingest_headers, admin_token, shots_from_columns(columns, START))
    names = [trace["name"] for trace in _figures(text)["chart-calib-series"]["data"]]
    assert names[0] == "per day (95 % interval)" and not any(name.startswith("per run") for name in names)
    assert "no shot carries a run tag (daq.run, daq.run_id, daq.run_number, run, run_id)" in html.unescape(text)


def test_a_long_axis_title_is_broken_at_spaces_with_the_unit_on_a_line_of_its_own():
    title = "wakefield_estimate_mv_m × (plasma.length_m − saturation_length_m) [MV]"
    assert title_lines(title, 36) == "wakefield_estimate_mv_m ×<br>(plasma.length_m −<br>saturation_length_m)<br>[MV]"
    assert title_lines("measured.halo_radius_mm", 36) == "measured.halo_radius_mm"
    assert title_lines("a <b> [x]", 36) == "a &lt;b&gt; [x]"  # short: one line, escaped
