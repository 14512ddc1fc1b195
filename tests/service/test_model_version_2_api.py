"""What MODEL.md version 2 changes at the API: a gradient that empties the plasma is refused naming the gradient,
density_scale is a campaign setting like the others, and a slow driver is flagged."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from app.tables import Shot


def _shots_url(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots"


def _fields(response) -> list[str]:
    return [e["field"] for e in response.json()["errors"]]


def test_a_daq_posts_a_shot_whose_gradient_empties_the_plasma_and_gets_422_naming_the_gradient(
    client, app, campaign, ingest_headers, make_shot
):
    # ex-1 is 8 m long: -15 %/m would take the density through zero at 6.7 m (MODEL.md section 1: 1 + g L > 0)
    response = client.post(
        _shots_url(campaign), json=make_shot(changes={"plasma.gradient_pct_per_m": -15.0}), headers=ingest_headers
    )
    assert response.status_code == 422
    assert response.headers["content-type"].startswith("application/problem+json")
    assert _fields(response) == ["plasma.gradient_pct_per_m"]
    batch = [make_shot(0, shot_id=f"g-{i}", taken_at=f"2026-11-17T10:00:0{i}Z") for i in range(3)]
    batch[2]["plasma"]["gradient_pct_per_m"] = -20.0
    response = client.post(f"{_shots_url(campaign)}/batch", json={"shots": batch}, headers=ingest_headers)
    assert response.status_code == 422
    assert _fields(response) == ["shots.2.plasma.gradient_pct_per_m"]
    with app.state.session_factory() as session:
        assert session.scalar(select(func.count()).select_from(Shot)) == 0


def test_density_scale_is_a_campaign_setting_and_a_bad_one_is_refused_naming_it(
    client, admin_headers, ingest_headers, viewer_headers, campaign, make_shot
):
    body = client.get(f"/api/v1/campaigns/{campaign}", headers=viewer_headers).json()
    assert body["effective_settings"]["density_scale"] == 1.0
    settings_url = f"/api/v1/campaigns/{campaign}/settings"
    response = client.patch(settings_url, json={"density_scale": 0.0}, headers=admin_headers)
    assert response.status_code == 422
    assert _fields(response) == ["settings.density_scale"]
    response = client.patch(settings_url, json={"density_scale": 1.02}, headers=admin_headers)
    assert response.status_code == 202, response.text  # accepted: the stored shots are re-evaluated in a job
    evaluation = client.post(_shots_url(campaign), json=make_shot(0), headers=ingest_headers).json()["evaluation"]
    # n_0 = 1.02 x the logged 4e14 cm^-3: f_p ~ sqrt(n_0) (NRL Plasma Formulary)
    assert evaluation["plasma_frequency_ghz"] == pytest.approx(179.57325622668458 * 1.02**0.5, rel=1e-12)


def test_a_slow_driver_is_flagged(client, campaign, ingest_headers, make_shot):
    # 5 GeV/c protons: gamma = 5.4, below the marginal limit 10 (MODEL.md section 7)
    evaluation = client.post(
        _shots_url(campaign), json=make_shot(changes={"driver.momentum_gev": 5.0}), headers=ingest_headers
    ).json()["evaluation"]
    flags = {f["code"]: f for f in evaluation["flags"]}
    assert flags["SLOW_DRIVER"]["severity"] == "marginal" and flags["SLOW_DRIVER"]["limit"] == 10.0
