"""The model against measurement at the API: a campaign whose density diagnostic reads low by a
known scale gets that scale back inside its interval, a step of the scale is found where it was
put (and none on steady data), applying the scale brings the frequency mismatch to zero, and a
power law with a known exponent is recovered. Truths are invented (tests/support/calibration_shots.py)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from tests.support.calibration_shots import (
    HALO_EXPONENT,
    WITNESS_EXPONENT,
    shots_from_columns,
    synthetic_columns,
)
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


def test_a_campaign_whose_density_reads_low_by_2_1_percent_gets_1_021_back_inside_the_interval(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 400, scale=1.021, seed=3)
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START))
    body = _calibration(client, campaign, viewer_headers)
    scale = body["density_scale"]
    assert scale["shots"] == 400
    assert scale["low"] < 1.021 < scale["high"]
    assert scale["high"] - scale["low"] < 0.002  # 0.2 % frequency noise on 400 shots
    assert body["applied_density_scale"] == 1.0
    assert body["changes"] == []  # one steady scale
    assert [s["shots"] for s in body["series"]] == [400]  # every shot on one day (UTC)
    # the measured frequency against the entrance plasma frequency: f ∝ √n, b = 1 (NRL Plasma Formulary)
    frequency = next(s for s in body["scaling"] if s["diagnostic"] == "measured.modulation_freq_ghz")
    assert frequency["exponent_low"] <= 1.0 <= frequency["exponent_high"]


def test_a_step_of_the_scale_is_found_within_a_few_shots_of_where_it_was_put(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 600, scale=1.015, scale_after=1.03, step_at=350, seed=5)
    shots = shots_from_columns(columns, START)
    _post(client, campaign, ingest_headers, shots)
    body = _calibration(client, campaign, viewer_headers)
    assert len(body["changes"]) == 1, body["changes"]
    change = body["changes"][0]
    assert abs(int(change["shot_id"].split("-")[1]) - 350) <= 5
    assert change["before"]["low"] < 1.015 < change["before"]["high"]
    assert change["after"]["low"] < 1.03 < change["after"]["high"]
    assert change["shots_before"] + change["shots_after"] == 600
    # a period after the step sees the later scale and no change
    after = _calibration(client, campaign, viewer_headers, **{"from": shots[400]["taken_at"]})
    assert after["changes"] == [] and after["density_scale"]["low"] < 1.03 < after["density_scale"]["high"]


def test_applying_the_estimate_brings_the_median_frequency_mismatch_to_zero_within_its_interval(
    app, client, campaign, ingest_headers, admin_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 300, scale=1.021, seed=7)
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START))
    before = _calibration(client, campaign, viewer_headers)
    mismatch = before["frequency_mismatch_pct"]
    assert mismatch["low"] > 0.9  # reading low by 2.1 % in density is about +1 % in frequency
    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings",
        json={"density_scale": before["density_scale"]["estimate"]},
        headers=admin_headers,
    )
    assert response.status_code == 202, response.text
    run_queued_jobs(app)
    after = _calibration(client, campaign, viewer_headers)
    assert after["applied_density_scale"] == before["density_scale"]["estimate"]
    assert after["frequency_mismatch_pct"]["low"] <= 0.0 <= after["frequency_mismatch_pct"]["high"]
    # the estimate is relative to the logged density: applying it does not move it
    assert after["density_scale"]["estimate"] == pytest.approx(before["density_scale"]["estimate"], rel=1e-9)


def test_the_halo_and_witness_power_laws_are_recovered_and_the_odd_shots_named(
    client, campaign, ingest_headers, viewer_headers, reference_cases
):
    columns = synthetic_columns(reference_cases[0]["input"], 400, scale=1.0, seed=11)
    columns["measured.halo_radius_mm"][[17, 201]] *= 2.0  # two shots the proxy does not explain
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START))
    body = _calibration(client, campaign, viewer_headers)
    checks = {s["diagnostic"]: s for s in body["scaling"]}
    halo = checks["measured.halo_radius_mm"]
    assert halo["exponent_low"] <= HALO_EXPONENT <= halo["exponent_high"]
    assert {"cal-00017", "cal-00201"} <= set(halo["outliers"])
    assert halo["spearman"] > 0.9
    witness = checks["measured.witness_energy_mev"]
    assert witness["exponent_low"] <= WITNESS_EXPONENT <= witness["exponent_high"]
    assert "project proxy" in halo["proxy_note"] and "project proxy" in witness["proxy_note"]
    drivers = {d["diagnostic"]: d for d in body["drivers"]}
    top = drivers["measured.modulation_freq_ghz"]["ranking"][0]
    assert top["field"] == "plasma.density_cm3" and top["low"] <= top["rho"] <= top["high"]


def test_a_period_that_ends_before_it_starts_is_a_422_naming_to(client, campaign, viewer_headers):
    response = client.get(
        f"/api/v1/campaigns/{campaign}/calibration",
        params={"from": "2026-11-20T00:00:00Z", "to": "2026-11-19T00:00:00Z"},
        headers=viewer_headers,
    )
    assert response.status_code == 422
    assert [e["field"] for e in response.json()["errors"]] == ["to"]
    empty = _calibration(client, campaign, viewer_headers)
    assert empty["shots"] == 0 and empty["density_scale"]["estimate"] is None


def test_an_unknown_campaign_is_a_404(client, viewer_headers):
    assert client.get("/api/v1/campaigns/nowhere/calibration", headers=viewer_headers).status_code == 404


def test_the_page_shows_the_scale_the_checks_and_links_the_odd_shots(
    client, campaign, ingest_headers, admin_token, reference_cases
):
    from tests.support.sessions import sign_in

    columns = synthetic_columns(reference_cases[0]["input"], 200, scale=1.021, seed=13)
    columns["measured.halo_radius_mm"][[42]] *= 2.5
    _post(client, campaign, ingest_headers, shots_from_columns(columns, START - timedelta(days=1)))
    sign_in(client, admin_token)
    page = client.get(f"/campaigns/{campaign}/calibration")
    assert page.status_code == 200
    assert "Calibration and scaling against measurement" in page.text
    assert f'href="/campaigns/{campaign}/shots/cal-00042"' in page.text
    assert 'id="calib-apply"' in page.text and "project proxies, not published laws" in page.text
    assert "<script>" not in page.text  # CSP: data blocks only
    overview = client.get(f"/campaigns/{campaign}")
    assert f'href="/campaigns/{campaign}/calibration"' in overview.text
