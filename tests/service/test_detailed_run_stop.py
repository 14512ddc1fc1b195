"""A detailed run stops 0.5 m past saturation by default and its charts say where; the
option stop_after_saturation is a boolean the API keeps with the run."""

from __future__ import annotations

import json

import pytest

from app.services.detailed_runs.figures import run_facts, run_figures
from model.envelope import envelope_result_to_json, simulate_envelope
from tests.support.detailed_runs import post_quick_shot
from tests.support.jobs import wait_for_job

RUNS = "/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs"


def test_the_charts_of_a_run_that_stopped_past_saturation_mark_where_it_stopped(reference_cases):
    shot = json.loads(json.dumps(reference_cases[0]["input"]))  # ex-1, saturating near 2.8 m
    shot["plasma"]["length_m"] = 4.0
    doc = envelope_result_to_json(simulate_envelope(shot))
    stopped = doc["stopped_at_m"]
    assert stopped is not None and stopped < 4.0
    figures = run_figures(doc)
    for name, along in (("map", "y"), ("growth", "x")):  # the map draws z up, the growth chart z across
        lines = [
            s
            for s in figures[name]["layout"]["shapes"]
            if s["type"] == "line" and s[f"{along}0"] == stopped and s[f"{along}ref"] == along
        ]
        notes = [a["text"] for a in figures[name]["layout"]["annotations"] if a["text"].startswith("run stopped")]
        assert lines and notes == [f"run stopped at z = {stopped:.3g} m, 0.5 m past saturation (plasma exit at 4 m)"]
    field_note = figures["field"]["layout"]["annotations"][0]["text"]
    assert field_note.startswith("where the run stopped, past saturation")
    assert dict(run_facts(doc))["end of the run"].startswith("run stopped at z = ")


def test_a_run_asked_to_go_to_the_exit_keeps_the_option_with_its_parameters(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    url = RUNS.format(campaign=campaign, shot=shot)
    answer = client.post(url, json={"stop_after_saturation": False}, headers=ingest_headers)
    assert answer.status_code == 202, answer.text
    job = wait_for_job(client, answer.json()["job_id"], viewer_headers)
    assert job["state"] == "succeeded", job
    [run] = client.get(url, headers=viewer_headers).json()["items"]
    assert run["parameters"]["stop_after_saturation"] is False
    result = client.get(run["url"], headers=viewer_headers).json()["result"]
    assert result["stopped_at_m"] is None and result["ez_z_m"] == pytest.approx(0.5)


def test_a_stop_option_that_is_not_a_boolean_gets_422_naming_it(client, campaign, ingest_headers, make_shot):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    answer = client.post(RUNS.format(campaign=campaign, shot=shot), json={"stop_after_saturation": "no"},
                         headers=ingest_headers)  # fmt: skip
    assert answer.status_code == 422
    assert [e["field"] for e in answer.json()["errors"]] == ["stop_after_saturation"]
