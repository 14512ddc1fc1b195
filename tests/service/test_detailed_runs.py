"""Detailed envelope runs through the API (background job, stored result) and the `simulate` command."""

from __future__ import annotations

import json
from html.parser import HTMLParser
from pathlib import Path

import pytest

from app.services.detailed_runs import lifecycle as run_service
from app.store import jobs as job_store
from tests.support.detailed_runs import post_quick_shot, run_quick_detailed_run
from tests.support.jobs import run_queued_jobs, wait_for_job

RUNS = "/api/v1/campaigns/{campaign}/shots/{shot}/detailed-runs"


def _runs(campaign: str, shot: str) -> str:
    return RUNS.format(campaign=campaign, shot=shot)


# --- API ---------------------------------------------------------------------------------------------


def test_ingest_starts_a_detailed_run_follows_its_progress_and_reads_the_stored_result(
    client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    response = client.post(_runs(campaign, shot), json={"slices_per_wavelength": 16}, headers=ingest_headers)
    assert response.status_code == 202, response.text
    started = response.json()
    assert response.headers["Location"] == f"/api/v1/jobs/{started['job_id']}"
    assert started["job"]["kind"] == "detailed_run"

    job = wait_for_job(client, started["job_id"], viewer_headers)
    assert job["state"] == "succeeded", job
    assert (job["done"], job["total"]) == (100, 100)
    run_id = job["result"]["run_id"]

    listed = client.get(_runs(campaign, shot), headers=viewer_headers).json()["items"]
    assert [r["id"] for r in listed] == [run_id]
    meta = listed[0]
    assert "result" not in meta
    assert meta["shot_revision"] == 1 and meta["job_id"] == started["job_id"]
    assert meta["parameters"]["slices_per_wavelength"] == 16 and meta["parameters"]["dz_m"] is None

    one = client.get(meta["url"], headers=viewer_headers)
    assert one.status_code == 200
    result = one.json()["result"]
    slices, stored_z = result["numerics"]["slices"], len(result["z_m"])
    assert len(result["sigma_r_m"]) == slices and len(result["sigma_r_m"][0]) == stored_z
    assert result["ez_z_m"] == pytest.approx(0.5)
    assert result["validity_note"]

    view = client.get(meta["figures_url"], headers=viewer_headers).json()
    assert set(view["figures"]) == {"map", "growth", "field"}
    assert view["validity_note"] == result["validity_note"]


def test_a_restarted_detailed_run_job_does_not_store_its_run_twice(
    app, client, campaign, ingest_headers, viewer_headers, make_shot
):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    job = run_quick_detailed_run(client, campaign, ingest_headers, shot)
    # As if its worker died after storing the run but before marking the job done: queued again.
    with app.state.session_factory() as session:
        job_store.set_job(session, job["id"], state="queued", lease_owner=None)
        session.commit()
    assert run_queued_jobs(app) == 1
    again = client.get(f"/api/v1/jobs/{job['id']}", headers=viewer_headers).json()
    assert again["state"] == "succeeded" and again["attempts"] == 2
    assert again["result"]["run_id"] == job["result"]["run_id"]
    assert len(client.get(_runs(campaign, shot), headers=viewer_headers).json()["items"]) == 1


def test_the_same_run_asked_twice_while_it_waits_is_one_job(client, campaign, ingest_headers, make_shot):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    # No worker runs here, so the first job waits in the queue.
    first = client.post(_runs(campaign, shot), headers=ingest_headers).json()["job_id"]
    second = client.post(_runs(campaign, shot), json={}, headers=ingest_headers).json()["job_id"]
    other = client.post(_runs(campaign, shot), json={"slices_per_wavelength": 17}, headers=ingest_headers).json()[
        "job_id"
    ]
    assert first == second != other
    for job_id in (first, other):
        assert wait_for_job(client, job_id, ingest_headers)["state"] == "succeeded"


def test_a_viewer_cannot_start_a_detailed_run_and_gets_403(client, campaign, ingest_headers, viewer_headers, make_shot):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    response = client.post(_runs(campaign, shot), headers=viewer_headers)
    assert response.status_code == 403
    assert response.headers["content-type"].startswith("application/problem+json")


def test_starting_or_reading_detailed_runs_without_a_token_gets_401(client, campaign, ingest_headers, make_shot):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    assert client.post(_runs(campaign, shot)).status_code == 401
    assert client.get(_runs(campaign, shot)).status_code == 401


def test_detailed_runs_of_an_unknown_shot_or_run_get_404(client, campaign, ingest_headers, viewer_headers, make_shot):
    assert client.post(_runs(campaign, "no-such-shot"), headers=ingest_headers).status_code == 404
    assert client.get(_runs(campaign, "no-such-shot"), headers=viewer_headers).status_code == 404
    assert client.post(_runs("no-such-campaign", "x"), headers=ingest_headers).status_code == 404
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    response = client.get(_runs(campaign, shot) + "/12345", headers=viewer_headers)
    assert response.status_code == 404
    assert "12345" in response.json()["detail"]


BAD_PARAMETERS = [
    ({"slices_per_wavelength": 8}, "slices_per_wavelength"),
    ({"slices_per_wavelength": 16.5}, "slices_per_wavelength"),
    ({"slices_per_wavelength": 100000}, "slices_per_wavelength"),
    ({"dz_m": -0.01}, "dz_m"),
    ({"dz_m": "small"}, "dz_m"),
    ({"dz_m": 1e-9}, "dz_m"),  # 5e8 steps over 0.5 m: past the solver's step limit
    ({"slices": 16}, "slices"),
]


def test_bad_run_parameters_get_422_naming_the_field_and_start_nothing(client, campaign, ingest_headers, make_shot):
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    for body, field in BAD_PARAMETERS:
        response = client.post(_runs(campaign, shot), json=body, headers=ingest_headers)
        assert response.status_code == 422, (body, response.text)
        assert [e["field"] for e in response.json()["errors"]] == [field], body
    assert client.get(_runs(campaign, shot), headers=ingest_headers).json()["items"] == []


def test_a_failed_run_marks_the_job_failed_with_the_message_and_stores_nothing(
    client, campaign, ingest_headers, viewer_headers, make_shot, monkeypatch
):
    from model import envelope

    def refuse(*_args, **_kwargs):
        raise envelope.EnvelopeSizeError("the bunch spans too many slices for this test")

    monkeypatch.setattr(envelope, "simulate_envelope", refuse)
    shot = post_quick_shot(client, campaign, ingest_headers, make_shot)
    response = client.post(_runs(campaign, shot), headers=ingest_headers)
    assert response.status_code == 202
    job = wait_for_job(client, response.json()["job_id"], viewer_headers)
    assert job["state"] == "failed"
    assert job["message"] == "EnvelopeSizeError: the bunch spans too many slices for this test"
    assert client.get(_runs(campaign, shot), headers=viewer_headers).json()["items"] == []


def test_solver_progress_reaches_the_job_as_percent_at_most_every_interval():
    reports: list[tuple[int, int]] = []
    now = [0.0]
    progress = run_service.JobProgress(
        lambda done, total, _msg: reports.append((done, total)), interval_s=1.0, clock=lambda: now[0]
    )
    for step in range(1, 11):  # 10 % per call, 0.4 s apart
        now[0] += 0.4
        progress(step / 10)
    assert reports == [(10, 100), (40, 100), (70, 100), (100, 100)]  # 100 % always


# --- the simulate command ---------------------------------------------------------------------------


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.ids: set[str] = set()
        self.script_sources: list[str] = []
        self.inline_scripts: list[str] = []
        self._in_script = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if "id" in attrs:
            self.ids.add(attrs["id"])
        if tag == "script":
            if attrs.get("src"):
                self.script_sources.append(attrs["src"])
            self._in_script = True
            self.inline_scripts.append("")

    def handle_endtag(self, tag):
        if tag == "script":
            self._in_script = False

    def handle_data(self, data):
        if self._in_script:
            self.inline_scripts[-1] += data


def _ex1_file(tmp_path: Path, reference_cases) -> Path:
    shot = next(c["input"] for c in reference_cases if c["input"]["shot_id"] == "ex-1")
    path = tmp_path / "ex-1.json"
    path.write_text(json.dumps(shot))
    return path


def test_simulate_writes_a_self_contained_html_file_with_the_three_plots_for_ex1(tmp_path, reference_cases, capsys):
    from app.cli import main

    out = tmp_path / "run.html"
    assert main(["simulate", str(_ex1_file(tmp_path, reference_cases)), "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "ex-1 envelope [" + "#" * 30 + "] 100%" in err
    assert f"wrote {out}" in err
    text = out.read_text(encoding="utf-8")
    page = _Page()
    page.feed(text)
    page.close()
    assert {"chart-map", "chart-growth", "chart-field", "validity-note"} <= page.ids
    assert page.script_sources == []  # nothing fetched: Plotly's JavaScript is inlined
    code = "".join(page.inline_scripts)
    assert "Plotly.newPlot" in code and code.count("Plotly.newPlot(") >= 3
    assert '"type":"heatmap"' in code.replace(" ", "")
    assert "valid until saturation" in text
    assert "does not replace machine protection, interlocks, radiation safety" in text
    assert not list(tmp_path.glob(".run.html.*"))  # no temporary file left behind


def test_simulate_refuses_a_bad_shot_naming_the_field_and_writes_nothing(tmp_path, reference_cases, capsys):
    from app.cli import main

    shot = json.loads(_ex1_file(tmp_path, reference_cases).read_text())
    shot["plasma"]["density_cm3"] = -4e14
    del shot["driver"]["sigma_r_mm"]
    source = tmp_path / "bad.json"
    source.write_text(json.dumps(shot))
    out = tmp_path / "run.html"
    assert main(["simulate", str(source), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "plasma.density_cm3" in err and "driver.sigma_r_mm" in err
    assert not out.exists()


def test_simulate_refuses_too_few_slices_naming_the_option(tmp_path, reference_cases, capsys):
    from app.cli import main

    out = tmp_path / "run.html"
    code = main(
        ["simulate", str(_ex1_file(tmp_path, reference_cases)), "--out", str(out), "--slices-per-wavelength", "8"]
    )
    assert code == 2
    assert "--slices-per-wavelength" in capsys.readouterr().err
    assert not out.exists()


def test_simulate_refuses_a_file_that_is_not_json(tmp_path, capsys):
    from app.cli import main

    source = tmp_path / "shot.json"
    source.write_text("{not json")
    assert main(["simulate", str(source), "--out", str(tmp_path / "run.html")]) == 2
    assert "is not a JSON shot" in capsys.readouterr().err
