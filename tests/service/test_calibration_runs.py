"""The density scale per run beside the scale per day, which payload keys count as a run tag, and the
lean read behind the answer: every shot read once, no model run where the stored evaluation already
gives c, and the same answer whichever way c was found. Truths are invented
(tests/support/calibration_shots.py)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from sqlalchemy import event

from app.cli import main
from app.times import format_utc
from model import calibration as cal
from tests.support.calibration_shots import shots_from_columns, synthetic_columns
from tests.support.jobs import run_queued_jobs

START = datetime(2026, 11, 16, 8, tzinfo=UTC)


def _post(client, campaign, headers, shots):
    for i in range(0, len(shots), 500):
        response = client.post(
            f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots[i : i + 500]}, headers=headers
        )
        assert response.status_code == 201, response.text


def _calibration(client, campaign, headers, **params):
    response = client.get(f"/api/v1/campaigns/{campaign}/calibration", params=params, headers=headers)
    assert response.status_code == 200, response.text
    return response.json()


def _utc(moment: datetime) -> str:
    return format_utc(moment)


def test_shots_with_run_tags_get_a_scale_per_run_beside_the_scale_per_day(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 300, scale=1.015, scale_after=1.03, step_at=150, seed=31)
    shots = shots_from_columns(columns, START, every_s=600)  # 300 shots over three days (UTC)
    for i, shot in enumerate(shots):
        if i < 100:
            shot["daq"] = {"run": 7, "crew": "B"}
        elif i < 200:
            shot["daq"] = {"run": "B-2"}
        elif i < 250:
            shot["run"] = 12  # a top-level run tag
    _post(client, campaign, ingest_headers, shots)
    body = _calibration(client, campaign, viewer_headers)
    assert body["series_by"] == "day" and len(body["series"]) == 3  # the per-day series is as it was
    assert body["run_series_by"] == ["daq.run", "run"]
    assert [r["run"] for r in body["run_series"]] == ["7", "B-2", "12"]
    assert [r["shots"] for r in body["run_series"]] == [100, 100, 50]
    assert body["run_untagged_shots"] == 50  # the last 50 carry no run tag: in the days only
    c = cal.density_scale_ratios(columns, {})
    for run, (lo, hi) in zip(body["run_series"], [(0, 100), (100, 200), (200, 250)], strict=True):
        assert run["first_taken_at"] == _utc(START + timedelta(seconds=600 * lo))
        assert run["last_taken_at"] == _utc(START + timedelta(seconds=600 * (hi - 1)))
        assert run["estimate"] == pytest.approx(np.median(c[lo:hi]), rel=1e-12)
        assert run["low"] < run["estimate"] < run["high"]
    # the run before the step holds the scale before it, the runs after the one after
    first, second, third = body["run_series"]
    assert first["low"] < 1.015 < first["high"] and third["low"] < 1.03 < third["high"]


def test_the_first_run_key_holding_a_text_or_a_whole_number_is_the_run_tag(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 60, scale=1.02, seed=32)
    shots = shots_from_columns(columns, START)
    tags = [
        {"daq": {"run": 7.5, "run_id": "R-1"}},  # a fraction is no run tag: daq.run_id is next
        {"daq": {"run": True, "run_number": 3}},  # nor a boolean
        {"daq": {"run": " "}, "run_id": 44},  # nor blank text
        {"daq": {"run": {"n": 1}}},  # nor an object: no tag at all
        {"daq": "run 5"},  # a section that is no object has no keys
        {"daq": {"run": "A"}, "run": "other"},  # daq.run comes first
    ]
    for i, shot in enumerate(shots):
        shot.update(tags[i // 10])
    _post(client, campaign, ingest_headers, shots)
    body = _calibration(client, campaign, viewer_headers)
    assert [r["run"] for r in body["run_series"]] == ["R-1", "3", "44", "A"]
    assert [r["shots"] for r in body["run_series"]] == [10, 10, 10, 10]
    assert body["run_series_by"] == ["daq.run", "daq.run_id", "daq.run_number", "run_id"]
    assert body["run_untagged_shots"] == 20


def test_without_run_tags_the_scale_is_given_per_day_only(
    client, campaign, ingest_headers, viewer_headers, reference_cases, database_url, capsys
):
    columns = synthetic_columns(reference_cases[0]["input"], 120, scale=1.02, seed=33)
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START))
    body = _calibration(client, campaign, viewer_headers)
    assert body["series_by"] == "day" and [s["shots"] for s in body["series"]] == [120]
    assert body["run_series"] == [] and body["run_series_by"] == [] and body["run_untagged_shots"] == 0
    assert main(["--database-url", database_url, "calibrate", "--campaign", campaign]) == 0
    assert "per run: no run tag in these shots (daq.run, daq.run_id" in capsys.readouterr().out


def test_the_command_line_table_names_the_per_run_series(
    client, campaign, ingest_headers, reference_cases, database_url, capsys
):
    columns = synthetic_columns(reference_cases[0]["input"], 90, scale=1.02, seed=34)
    shots = shots_from_columns(columns, START)
    for i, shot in enumerate(shots):
        shot["daq"] = {"run": 300 + i // 30}
    _post(client, campaign, ingest_headers, shots)
    assert main(["--database-url", database_url, "calibrate", "--campaign", campaign]) == 0
    out = capsys.readouterr().out
    assert "scale series: per day (1 days); per run by daq.run (3 runs)" in out
    assert "lowest run 30" in out and "highest run 30" in out


def _statements(app):
    seen: list[tuple[str, object]] = []

    def record(_conn, _cursor, statement, parameters, _context, _many):
        seen.append((statement, parameters))

    event.listen(app.state.engine, "before_cursor_execute", record)
    return seen, lambda: event.remove(app.state.engine, "before_cursor_execute", record)


def test_the_answer_reads_every_shot_once_and_every_input_only_of_the_shots_that_need_it(
    app, client, campaign, ingest_headers, viewer_headers, reference_cases, monkeypatch
):
    n = 1200
    columns = synthetic_columns(reference_cases[0]["input"], n, scale=1.02, seed=35)
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START, every_s=30))
    modelled: list[int] = []
    by_model = cal.density_scale_ratios
    monkeypatch.setattr(
        cal,
        "density_scale_ratios",
        lambda cols, s: modelled.append(len(cols["plasma.density_cm3"])) or by_model(cols, s),
    )
    seen, stop = _statements(app)
    try:
        body = _calibration(client, campaign, viewer_headers)
    finally:
        stop()
    assert body["density_scale"]["shots"] == n
    assert modelled == []  # evaluations current at scale 1: c comes from them, the model does not run
    reads = [s for s, _ in seen if "FROM shots" in s and "driver_species" not in s and "ORDER BY shots.taken_at" in s]
    assert len(reads) == 1  # one pass over the shots
    assert "raw_payload" in reads[0] and "driver_emittance_n_mm_mrad" not in reads[0]  # run tags in SQL, few columns
    wide = [p for s, p in seen if "driver_species" in s and "FROM shots" in s]
    wanted = sum(len(p) if isinstance(p, list | tuple) else len(p or {}) for p in wide)
    assert wanted <= 6 * cal.DRIVER_MAX_SHOTS + 200 + 10  # the driver and phase-derivative samples only


def test_the_scale_is_the_same_whether_c_comes_from_the_stored_evaluations_or_the_model(
    app, client, campaign, ingest_headers, admin_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 240, scale=1.021, seed=36)
    columns["plasma.gradient_pct_per_m"][120:] = 0.25  # with a gradient, c at another scale needs the model
    shots = shots_from_columns(columns, START)
    for i, shot in enumerate(shots):
        shot["daq"] = {"run": i // 60}
    _post(client, campaign, ingest_headers, shots)
    at_one = _calibration(client, campaign, viewer_headers)  # applied scale 1: every c from the store
    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings", json={"density_scale": 1.3}, headers=admin_headers
    )
    assert response.status_code == 202, response.text
    stale = _calibration(client, campaign, viewer_headers)  # re-evaluation not run yet: every c from the model
    run_queued_jobs(app)
    current = _calibration(client, campaign, viewer_headers)  # at 1.3: half from the store, half from the model
    expected = cal.density_scale_ratios(columns, {})
    for body in (at_one, stale, current):
        assert body["density_scale"]["estimate"] == pytest.approx(np.median(expected), rel=1e-12)
        runs = [r["estimate"] for r in body["run_series"]]
        assert runs == pytest.approx([np.median(expected[i : i + 60]) for i in range(0, 240, 60)], rel=1e-12)
    assert current["applied_density_scale"] == 1.3
