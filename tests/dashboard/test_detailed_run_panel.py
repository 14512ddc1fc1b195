"""The shot page's detailed-run panel: latest stored run, start button for ingest/admin, CSP-safe data."""

from __future__ import annotations

import json
import re

from app.services.detailed_runs import figures as run_figures
from tests.support.detailed_runs import post_quick_shot, run_quick_detailed_run
from tests.support.sessions import sign_in


def _panel_config(html: str) -> dict:
    match = re.search(r'<script type="application/json" id="detailed-run-config">(.*?)</script>', html, re.S)
    assert match, "the panel's JSON data block is missing"
    return json.loads(match.group(1))


def test_shot_page_shows_the_latest_detailed_run_with_its_three_charts_and_validity(
    client, campaign, admin_headers, viewer_token, make_shot
):
    shot = post_quick_shot(client, campaign, admin_headers, make_shot)
    run_quick_detailed_run(client, campaign, admin_headers, shot)
    job = run_quick_detailed_run(client, campaign, admin_headers, shot)  # the second one is the latest

    sign_in(client, viewer_token)
    response = client.get(f"/campaigns/{campaign}/shots/{shot}")
    assert response.status_code == 200
    html = response.text
    assert 'id="detailed-run"' in html and 'src="/static/js/detailed_run.js?v=' in html
    latest = _panel_config(html)["latest"]
    assert latest["run"]["id"] == job["result"]["run_id"]
    assert set(latest["figures"]) == {"map", "growth", "field"}
    assert latest["validity_note"] and latest["validity_note"] in html
    heatmap = latest["figures"]["map"]["data"][0]
    assert heatmap["type"] == "heatmap"
    assert len(heatmap["x"]) <= run_figures.MAP_MAX_ZETA and len(heatmap["y"]) <= run_figures.MAP_MAX_Z
    # Both charts over the bunch read the same way: ζ across, the head to the right.
    map_x = latest["figures"]["map"]["layout"]["xaxis"]["title"]["text"]
    field_x = latest["figures"]["field"]["layout"]["xaxis"]["title"]["text"]
    assert map_x.startswith("ζ along the bunch [mm] (head right") and field_x.startswith(map_x[:30])
    # The seed's position reads in mm, as bunch positions do on every page.
    seed = dict(latest["facts"])["seed"] if "facts" in latest else None
    assert seed is None or " m" not in seed.replace(" mm", "")
    assert latest["figures"]["growth"]["layout"]["yaxis"]["type"] == "log"
    names = [t["name"] for t in latest["figures"]["growth"]["data"]]
    assert "δ(z) envelope solver" in names and "δ(z) closed form" in names
    # viewers see the stored run but get no start button
    assert 'id="detailed-run-form"' not in html
    # CSP: no inline executable script anywhere on the page
    for tag in re.findall(r"<script\b[^>]*>", html):
        assert "src=" in tag or 'type="application/json"' in tag, tag


def test_shot_page_without_a_run_says_so_and_offers_the_start_button_to_ingest_and_admin(
    client, campaign, admin_headers, ingest_token, make_shot
):
    shot = post_quick_shot(client, campaign, admin_headers, make_shot)
    sign_in(client, ingest_token)
    html = client.get(f"/campaigns/{campaign}/shots/{shot}").text
    assert "No detailed run has been stored for this shot yet." in html
    assert 'id="detailed-run-form"' in html
    config = _panel_config(html)
    assert config["latest"] is None and config["job_id"] is None
    assert config["runs_url"] == f"/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs"


def test_chart_payload_of_a_long_bunch_stays_small(reference_cases):
    """ex-2 has about 13,000 slices: the page gets a decimated map and the field as a min/max band."""
    from model.envelope import envelope_result_to_json, simulate_envelope

    shot = next(c["input"] for c in reference_cases if c["input"]["shot_id"] == "ex-2")
    shot = json.loads(json.dumps(shot))
    shot["plasma"]["length_m"] = 0.05
    doc = envelope_result_to_json(simulate_envelope(shot, dz_m=0.01))
    figures = run_figures.run_figures(doc)
    assert len(json.dumps(figures)) < 1_000_000
    field = figures["field"]["data"]
    assert len(field) == 2 and field[1]["fill"] == "tonexty"
    assert len(field[0]["x"]) <= run_figures.FIELD_MAX_POINTS
