"""On shift a shot arrives every few seconds. After each new shot the overview's chart feeds and
counts read only the new shots (app.services.dashboard.feed_reads) and show exactly what reading
the whole campaign afresh shows, with every series thinned as a large campaign's are (the caps are
lowered so that the test campaign's shots are "many"). A correction, an exclusion, a settings
change or a re-evaluation in between makes them read the campaign afresh. Nothing here is timed."""

from __future__ import annotations

import time
from typing import Any

import pytest

from app.services.campaigns import find_campaign
from app.services.dashboard import feed_reads, figures, overview
from app.store import dashboard as store
from tests.support.jobs import run_queued_jobs
from tests.support.page_shots import page_shots

SLUG = "test-campaign"
FEEDS = ("timeline", "phase", "calibration")


@pytest.fixture
def thinned(monkeypatch):
    """Caps so low that the seeded campaign's series are every k-th shot, k changing as shots arrive."""
    monkeypatch.setattr(figures, "TIMELINE_NOMINAL_POINTS", 7)
    monkeypatch.setattr(figures, "TIMELINE_FLAGGED_POINTS", 2)
    monkeypatch.setattr(figures, "FLAGGED_POINTS_CAP", 2)
    monkeypatch.setattr(figures, "SCATTER_NOMINAL_POINTS", 9)
    monkeypatch.setattr(figures, "PHASE_MAX_ROWS", 10)
    monkeypatch.setattr(figures, "CALIBRATION_MAX_ROWS", 8)
    monkeypatch.setattr(figures, "NOMINAL_MARKERS_MAX", 5)
    monkeypatch.setattr(figures, "FLAGGED_MARKERS_MAX", 2)


@pytest.fixture
def reads_after(monkeypatch) -> list[Any]:
    """The ``after_pk`` of every count of the campaign's values: None when it was read whole."""
    seen: list[Any] = []
    counting = store.counts_with_values_of

    def recorded(*args, **kwargs):
        seen.append(kwargs.get("after_pk"))
        return counting(*args, **kwargs)

    monkeypatch.setattr(store, "counts_with_values_of", recorded)
    return seen


def _overview(app) -> dict[str, Any]:
    """Every feed the overview page loads and its counts, as a viewer's browser would get them now."""
    with app.state.session_factory() as session:
        campaign = find_campaign(session, SLUG)
        shown: dict[str, Any] = {name: overview.chart_feed(session, campaign, name) for name in FEEDS}
        shown["regime"] = overview.regime_feed(session, campaign, *figures.DEFAULT_REGIME_AXES)
        shown["counts"] = overview.campaign_counts(session, campaign)
        page = vars(overview.overview(session, campaign))
        shown["page"] = {name: value for name, value in page.items() if name != "campaign"}
        return shown


def _read_afresh(app) -> dict[str, Any]:
    """The same, from the whole campaign, leaving the caches as they were."""
    kept = (dict(feed_reads._CAMPAIGNS), dict(overview._FEEDS), dict(overview._COUNTS))
    for cache in (feed_reads._CAMPAIGNS, overview._FEEDS, overview._COUNTS):
        cache.clear()
    try:
        return _overview(app)
    finally:
        for cache, entries in zip((feed_reads._CAMPAIGNS, overview._FEEDS, overview._COUNTS), kept, strict=True):
            cache.clear()
            cache.update(entries)


def _post(client, headers, shot) -> None:
    response = client.post(f"/api/v1/campaigns/{SLUG}/shots", json=shot, headers=headers)
    assert response.status_code == 201, response.text


def test_after_each_new_shot_the_overview_shows_exactly_what_reading_the_campaign_afresh_shows(
    app, seeded, client, admin_headers, make_shot, thinned, reads_after
):
    _overview(app)
    new = page_shots(make_shot, count=48)[36:]  # the same mix of statuses, later
    for i in range(3, 9):  # stored late: taken before every other shot (some of them are kept in each series)
        new[i]["taken_at"] = f"2026-11-16T06:{5 * i:02d}:00Z"
    new[8].pop("measured")  # no measured frequency or phase
    for shot in new:
        _post(client, admin_headers, shot)
        reads_after.clear()
        after_the_shot = _overview(app)
        assert reads_after and None not in reads_after  # only the new shot was read
        assert after_the_shot == _read_afresh(app)


def test_a_correction_an_exclusion_or_a_settings_change_makes_the_overview_read_the_campaign_afresh(
    app, seeded, client, admin_headers, make_shot, thinned, reads_after
):
    _overview(app)
    corrected = make_shot(0, shot_id="pg-0003", changes={"plasma.density_cm3": 4.4e14})
    response = client.put(
        f"/api/v1/campaigns/{SLUG}/shots/pg-0003?reason=unit fix", json=corrected, headers=admin_headers
    )
    assert response.status_code == 200, response.text
    _post(client, admin_headers, page_shots(make_shot, count=37)[36])
    writes = [
        lambda: client.post(
            f"/api/v1/campaigns/{SLUG}/shots/pg-0005/exclusion", json={"reason": "test pulse"}, headers=admin_headers
        ),
        lambda: client.patch(f"/api/v1/campaigns/{SLUG}/settings", json={"noise_floor": 0.002}, headers=admin_headers),
    ]
    for write in [None, *writes]:
        if write is not None:
            assert write().status_code < 300
        reads_after.clear()
        shown = _overview(app)
        assert None in reads_after  # read whole
        assert shown == _read_afresh(app)
    run_queued_jobs(app)  # the settings' re-evaluation rewrites statuses: its end moves the marks
    reads_after.clear()
    assert _overview(app) == _read_afresh(app) and None in reads_after


def test_a_queued_reevaluation_is_among_the_change_marks(app, seeded, client, admin_headers):
    with app.state.session_factory() as session:
        before = store.change_marks(session, find_campaign(session, SLUG))
    client.patch(f"/api/v1/campaigns/{SLUG}/settings", json={"noise_floor": 0.002}, headers=admin_headers)
    with app.state.session_factory() as session:
        campaign = find_campaign(session, SLUG)
        queued = store.change_marks(session, campaign)
        assert [(kind, state) for _, kind, state, _ in queued[2]] == [("reevaluate", "queued")]
        assert not feed_reads.only_new_shots(session, campaign, (*before, 1), (*queued, 1))
    run_queued_jobs(app)
    with app.state.session_factory() as session:
        assert store.change_marks(session, find_campaign(session, SLUG))[2] == ()


def _forget_every_read() -> None:
    for cache in (feed_reads._CAMPAIGNS, overview._FEEDS, overview._COUNTS):
        cache.clear()


def test_after_a_restart_the_first_viewer_gets_the_overview_the_server_warmed_and_it_equals_a_fresh_read(
    app, seeded, thinned, reads_after
):
    _forget_every_read()  # as in a process just started
    overview.warm_overviews(app.state.session_factory, campaigns=3)
    reads_after.clear()
    first_view = _overview(app)
    assert reads_after == []  # every count and feed came from what the warm-up computed
    assert first_view == _read_afresh(app)


def test_the_server_warms_the_overviews_in_the_background_when_it_starts(seeded, settings):
    from fastapi.testclient import TestClient

    from app.main import create_app

    _forget_every_read()
    started = create_app(settings.model_copy(update={"warm_overview_campaigns": 1}))
    try:
        with TestClient(started):
            deadline = time.monotonic() + 120  # the suite's bound for a loaded machine
            while len(overview._FEEDS) < len(FEEDS) + 1 and time.monotonic() < deadline:
                time.sleep(0.05)
        assert {key[2] for key in overview._FEEDS} == {*FEEDS, "regime"}  # joined at shutdown: complete
    finally:
        started.state.engine.dispose()


def test_a_failing_warm_up_is_logged_and_leaves_the_server_running(caplog):
    def broken_factory():
        raise RuntimeError("database unreachable")

    overview.warm_overviews(broken_factory, campaigns=3)  # no exception
    assert "warming the overviews failed" in caplog.text


def test_charts_that_thin_alike_share_one_read_and_draw_exactly_what_their_own_reads_draw(
    app, seeded, client, admin_headers, make_shot, thinned, monkeypatch
):
    later = page_shots(make_shot, count=40)[36:]
    later[0].pop("measured")  # no measured phase or frequency: the phase chart and the calibration map leave it out
    later[1]["measured"].pop("modulation_phase_rad")  # a frequency but no phase
    for shot in later:
        _post(client, admin_headers, shot)
    reads: list[str] = []
    reading = store.status_rows

    def recorded(*args, **kwargs):
        reads.append(args[2])
        return reading(*args, **kwargs)

    monkeypatch.setattr(store, "status_rows", recorded)
    _forget_every_read()
    shown = _overview(app)
    shared_reads = len(reads)
    with app.state.session_factory() as session:
        campaign = find_campaign(session, SLUG)
        cursor = shown["timeline"]["cursor"]
        reads.clear()
        own = {  # each chart through its own reads (DirectReader), now
            "timeline": figures.timeline_figure(session, campaign, upto_pk=cursor),
            "phase": figures.phase_figure(session, campaign, upto_pk=cursor),
            "calibration": figures.calibration_figure(session, campaign, upto_pk=cursor),
            "regime": figures.regime_figure(session, campaign, *figures.DEFAULT_REGIME_AXES, upto_pk=cursor),
        }
    for name, figure in own.items():
        assert shown[name]["figure"] == figure, name
    assert shared_reads < len(reads)  # 3 statuses x 4 charts read separately; alike ones shared


def test_a_served_app_keeps_what_it_started_with_out_of_the_garbage_collectors_walks(settings):
    import gc

    from fastapi.testclient import TestClient

    from app.main import create_app

    served = create_app(settings)
    served.state.freeze_after_start = True  # as `wakeledger serve` does
    try:
        with TestClient(served):
            assert gc.get_freeze_count() > 0
    finally:
        gc.unfreeze()  # the test process goes on collecting as before
        served.state.engine.dispose()
    plain = create_app(settings)  # an app embedded elsewhere (the tests) leaves the collector alone
    try:
        with TestClient(plain):
            assert gc.get_freeze_count() == 0
    finally:
        plain.state.engine.dispose()
