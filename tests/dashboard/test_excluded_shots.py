"""A physicist on shift excludes a junk shot: the overview's counts, flag table, feeds,
regime map, timeline, phase-stability and calibration figures, and the campaign list
no longer see it; the table lists it only when asked."""

from __future__ import annotations

import re

from sqlalchemy import func, select, text

from app.services.campaigns import find_campaign
from app.services.dashboard import figures, overview
from app.store import dashboard as store
from app.store.exclusions import counted
from app.tables import Evaluation

SLUG = "test-campaign"


def _outside_shot_ids(client, headers) -> list[str]:
    items = client.get(
        f"/api/v1/campaigns/{SLUG}/shots", params={"status": "outside", "limit": 100}, headers=headers
    ).json()["items"]
    return [i["shot_id"] for i in items]


def _exclude(client, headers, shot_id: str, reason: str = "junk: sigma_r posted in metres") -> None:
    response = client.post(
        f"/api/v1/campaigns/{SLUG}/shots/{shot_id}/exclusion", json={"reason": reason}, headers=headers
    )
    assert response.status_code == 201, response.text


def _points(figure) -> set[str]:
    return {i for t in figure["data"] if t.get("meta") for i in t.get("customdata") or []}


def test_an_excluded_outside_shot_leaves_every_count_and_chart_of_the_overview(seeded, db, client, admin_headers):
    [junk, *_] = _outside_shot_ids(client, admin_headers)
    campaign = find_campaign(db, SLUG)
    flags_before = {f.code: f.total for f in figures.flag_code_counts(db, campaign)}
    phase_before = figures.phase_summary(db, campaign).shots_with_phase
    calibration_before = figures.calibration_summary(db, campaign).shots_with_frequency
    junk_flags = [
        f["code"]
        for f in client.get(f"/api/v1/campaigns/{SLUG}/shots/{junk}", headers=admin_headers).json()["evaluation"][
            "flags"
        ]
    ]
    assert junk in _points(figures.timeline_figure(db, campaign))

    _exclude(client, admin_headers, junk)
    db.rollback()

    data = overview.overview(db, campaign)
    assert data.counts == {"nominal": 27, "marginal": 3, "outside": 5}
    assert data.excluded_count == 1
    flags_after = {f.code: f.total for f in data.flag_counts}
    for code in junk_flags:
        assert flags_after.get(code, 0) == flags_before[code] - 1, code
    assert junk not in _points(figures.timeline_figure(db, campaign))
    regime = figures.regime_figure(db, campaign, "plasma_density_cm3", "efolds_exit")
    assert sum(len(t["x"]) for t in regime["data"] if t.get("meta")) == 35
    assert junk not in _points(regime)
    assert figures.phase_summary(db, campaign).shots_with_phase <= phase_before
    assert figures.calibration_summary(db, campaign).shots_with_frequency <= calibration_before
    [(_, counts, _latest)] = store.campaigns_with_status_counts(db)
    assert sum(counts.values()) == 35
    live = client.get(f"/campaigns/{SLUG}/live", headers=admin_headers).json()
    assert live["counts"]["outside"] == 5


def test_the_phase_and_calibration_figures_count_only_counted_shots(seeded, db, client, admin_headers):
    campaign = find_campaign(db, SLUG)
    with_phase = [
        i["shot_id"]
        for i in client.get(f"/api/v1/campaigns/{SLUG}/shots", params={"limit": 100}, headers=admin_headers).json()[
            "items"
        ]
        if i["payload"].get("measured", {}).get("modulation_phase_rad") is not None
        and i["payload"].get("measured", {}).get("modulation_freq_ghz") is not None
    ]
    before = (
        figures.phase_summary(db, campaign).shots_with_phase,
        figures.calibration_summary(db, campaign).shots_with_frequency,
    )
    _exclude(client, admin_headers, with_phase[0])
    db.rollback()
    after = (
        figures.phase_summary(db, campaign).shots_with_phase,
        figures.calibration_summary(db, campaign).shots_with_frequency,
    )
    assert after == (before[0] - 1, before[1] - 1)


def test_the_shot_table_lists_excluded_shots_only_when_asked_and_marks_them(
    seeded, viewer_client, client, admin_headers
):
    [junk, *_] = _outside_shot_ids(client, admin_headers)
    _exclude(client, admin_headers, junk, "test pulse")
    default = viewer_client.get(f"/campaigns/{SLUG}/shots").text
    assert f'/shots/{junk}"' not in default
    assert re.search(r'data-total="35"', default)
    shown = viewer_client.get(f"/campaigns/{SLUG}/shots", params={"excluded": "include"}).text
    assert re.search(r'data-total="36"', shown)
    assert 'class="excluded" title="excluded: test pulse"' in shown
    only = viewer_client.get(f"/campaigns/{SLUG}/shots", params={"excluded": "only"}).text
    assert re.search(r'data-total="1"', only) and f'/shots/{junk}"' in only
    assert '<option value="only" selected>' in only
    # the CSV link keeps the choice
    assert "shots.csv?excluded=only" in only


def test_leaving_excluded_shots_out_reads_the_index_of_the_excluded_shots_not_every_shot(seeded, db):
    # At 100,000 shots the (campaign_id, id) index cost every overview query 30-40 ms here.
    stmt = select(func.count()).select_from(Evaluation).where(*counted(Evaluation.shot_pk, 1))
    assert db.scalar(stmt) == 36
    if db.get_bind().dialect.name == "sqlite":
        sql = str(stmt.compile(db.get_bind(), compile_kwargs={"literal_binds": True}))
        plan = [str(row[-1]) for row in db.execute(text("EXPLAIN QUERY PLAN " + sql))]
        reads_of_shots = [step for step in plan if " shots " in f" {step} "]
        assert reads_of_shots and all("ix_shots_excluded" in step for step in reads_of_shots), plan
