"""The overview at a glance (issue 15 item 6) and fast (issue 16 goal 1): robust axis ranges
with wild shots pinned and marked, the latest outside shots, counts that the steady poll
reads from a cache, compressed and long-cached assets, the weekly report's grouped flag
sentences, the settings' rounded values. Nothing here is timed."""

from __future__ import annotations

import gzip
import re
from datetime import UTC, datetime

import pytest
from sqlalchemy import text, update

from app.presentation.charts import robust_range
from app.services.campaigns import find_campaign
from app.services.dashboard import figures, overview
from app.services.weekly.report import sentence_groups
from app.services.weekly.report_charts import scatter_svg
from app.services.weekly.summary import FlaggedShot
from app.store import dashboard as store
from app.store.exports import FlagRow
from app.tables import Shot

SLUG = "test-campaign"


def _campaign(db):
    return find_campaign(db, SLUG)


@pytest.fixture
def wild(client, seeded, admin_headers, make_shot):
    """The seeded campaign plus one shot whose beam size was posted in metres (a tiny beam:
    a huge growth) and one shot whose clock said 2099."""
    metres = make_shot(shot_id="wrong-unit", taken_at="2026-11-17T20:00:00Z", changes={"driver.sigma_r_mm": 0.0002})
    r = client.post(f"/api/v1/campaigns/{seeded}/shots", json=metres, headers=admin_headers)
    assert r.status_code == 201, r.text
    dated = make_shot(shot_id="wrong-clock", taken_at="2026-11-17T20:07:00Z")
    r = client.post(f"/api/v1/campaigns/{seeded}/shots", json=dated, headers=admin_headers)
    assert r.status_code == 201, r.text
    return seeded


def _set_taken_at(db, shot_id: str, when: datetime) -> None:
    # The API refuses a shot from 2099 (the taken_at window); a clock gone wrong is set here.
    db.execute(update(Shot).where(Shot.shot_id == shot_id).values(taken_at=when))
    db.commit()


def test_one_wild_value_among_many_cannot_stretch_an_axis_but_a_wide_spread_is_left_alone():
    normal = [20.0 + 0.1 * i for i in range(40)]
    lo, hi = robust_range([*normal, 1606.0])
    assert lo <= 20.0 and 23.9 <= hi < 100
    assert robust_range(normal) is None  # nothing to pin: the axis fits every value
    assert robust_range([1.0, 2.0]) is None  # too few values to call one wild


def test_a_beam_size_posted_in_metres_is_pinned_at_the_regime_maps_edge_and_says_so(wild, db):
    figure = figures.regime_figure(db, _campaign(db), "plasma_density_cm3", "efolds_exit")
    pinned = [t for t in figure["data"] if t.get("meta", {}).get("pinned")]
    assert len(pinned) == 1 and pinned[0]["customdata"] == ["wrong-unit"]
    trace = pinned[0]
    assert trace["marker"]["symbol"] == ["triangle-up"]  # a distinct symbol, pointing past the edge
    assert "out of range" in trace["hovertext"][0] and "1428" in trace["hovertext"][0]
    y_range = figure["layout"]["yaxis"]["range"]
    assert trace["y"][0] <= y_range[1]  # drawn on the chart, at the edge
    others = [y for t in figure["data"] if not t.get("meta", {}).get("pinned") for y in t["y"] if y is not None]
    assert max(others) <= y_range[1] and max(others) > 0.5 * y_range[1]  # the other shots are not flattened
    assert all("wrong-unit" not in t["customdata"] for t in figure["data"] if not t.get("meta", {}).get("pinned"))


def test_a_shot_dated_2099_is_pinned_at_the_timelines_right_edge(wild, db):
    _set_taken_at(db, "wrong-clock", datetime(2099, 1, 1, tzinfo=UTC))
    figure = figures.timeline_figure(db, _campaign(db))
    x_range = figure["layout"]["xaxis"]["range"]
    assert x_range[1] < "2027"  # the axis ends with the campaign, not in 2099
    pinned = [t for t in figure["data"] if t.get("meta", {}).get("pinned")]
    assert pinned and all("wrong-clock" in t["customdata"] for t in pinned)
    clock = [t for t in pinned if "wrong-clock" in t["customdata"]][0]
    i = clock["customdata"].index("wrong-clock")
    assert clock["marker"]["symbol"][i] == "triangle-right" and clock["x"][i] <= x_range[1]
    assert "out of range" in clock["hovertext"][i] and "2099" in clock["hovertext"][i]


def test_the_weekly_charts_pin_a_wild_value_instead_of_flattening(wild):
    import numpy as np

    y = np.array([1.0 + 0.01 * i for i in range(40)] + [1606.0])
    svg = str(scatter_svg(np.arange(41.0), y, np.array(["nominal"] * 41), title="t", x_label="x", y_label="y"))
    assert svg.count('class="points pinned marker-triangle-up"') == 1
    assert "1 shot out of range, pinned at the edge" in svg


def test_the_overview_lists_the_latest_outside_shots_with_their_flags_and_values(viewer_client, wild, db):
    data = overview.overview(db, _campaign(db))
    assert 1 <= len(data.latest_outside) <= overview.LATEST_OUTSIDE_ROWS
    assert all(s["status"] == "outside" and s["flags"] for s in data.latest_outside)
    times = [s["taken_at"] for s in data.latest_outside]
    assert times == sorted(times, reverse=True)  # newest first
    html = viewer_client.get(f"/campaigns/{SLUG}").text
    first = data.latest_outside[0]
    assert 'id="outside-rows"' in html and first["shot_id"] in html
    assert first["flags"][0]["code"] in html.split('id="outside-rows"')[1].split("</tbody>")[0]


def test_the_steady_poll_reads_cached_counts_until_a_new_shot_or_write_moves_them(
    client, seeded, admin_headers, make_shot, db, monkeypatch
):
    campaign = _campaign(db)
    first = overview.campaign_counts(db, campaign)
    calls = []
    monkeypatch.setattr(store, "status_counts", lambda *a, **k: calls.append(1) or first.counts)
    again = overview.campaign_counts(db, campaign)
    assert again is first and calls == []  # nothing changed: no count query
    r = client.post(f"/api/v1/campaigns/{seeded}/shots", json=make_shot(shot_id="late-1"), headers=admin_headers)
    assert r.status_code == 201
    db.rollback()  # a new read (each request has its own session)
    overview.campaign_counts(db, campaign)
    assert calls == [1]  # a new shot: counted afresh


def test_the_live_feed_counts_follow_a_correction_that_changes_a_status(client, seeded, admin_headers, make_shot, db):
    campaign = _campaign(db)
    before = overview.campaign_counts(db, campaign).counts
    shot = make_shot(shot_id="swing", taken_at="2026-11-17T21:00:00Z")
    assert client.post(f"/api/v1/campaigns/{seeded}/shots", json=shot, headers=admin_headers).status_code == 201
    wide = make_shot(shot_id="swing", taken_at="2026-11-17T21:00:00Z", changes={"driver.sigma_r_mm": 3.0})
    r = client.put(f"/api/v1/campaigns/{seeded}/shots/swing", json=wide, headers=admin_headers)
    assert r.status_code in (200, 201), r.text
    db.rollback()  # a new read (each request has its own session)
    counted = overview.campaign_counts(db, _campaign(db))
    assert sum(counted.counts.values()) == sum(before.values()) + 1
    assert counted.counts == store.status_counts(db, campaign.id)  # the cache is never stale


def test_the_latest_shot_is_one_seek_of_the_campaign_id_index(db, seeded):
    query = "SELECT id FROM shots WHERE campaign_id = 1 ORDER BY id DESC LIMIT 1"
    if db.get_bind().dialect.name == "sqlite":
        plan = " ".join(str(row) for row in db.execute(text("EXPLAIN QUERY PLAN " + query)))
        assert "ix_shots_campaign_id_id" in plan or "PRIMARY" in plan or "INTEGER PRIMARY KEY" in plan
        assert "TEMP B-TREE" not in plan  # no sort of the campaign
    else:  # PostgreSQL: the index exists (its planner may prefer a scan of a table this small)
        names = {row[0] for row in db.execute(text("SELECT indexname FROM pg_indexes WHERE tablename = 'shots'"))}
        assert "ix_shots_campaign_id_id" in names


def test_pages_and_feeds_go_out_compressed_and_versioned_assets_are_kept_a_year(viewer_client, seeded):
    page = viewer_client.get(f"/campaigns/{SLUG}", headers={"Accept-Encoding": "gzip"})
    assert page.headers.get("content-encoding") == "gzip"
    feed = viewer_client.get(f"/campaigns/{SLUG}/charts/timeline.json", headers={"Accept-Encoding": "gzip"})
    assert feed.headers.get("content-encoding") == "gzip"
    scripts = re.findall(r'<script src="([^"]+)"', page.text)
    plotly = next(s for s in scripts if "plotly.min.js" in s)
    ours = next(s for s in scripts if "wakeledger.js" in s)
    assert "?v=" in plotly and "?v=" in ours
    # wakeledger.js comes first: it asks for the feeds while Plotly is still being parsed
    assert scripts.index(ours) < scripts.index(plotly)
    with viewer_client.stream("GET", plotly, headers={"Accept-Encoding": "gzip"}) as r:
        raw = b"".join(r.iter_raw())
        assert r.headers["content-encoding"] == "gzip"
        assert r.headers["cache-control"] == "public, max-age=31536000, immutable"
    assert len(raw) < 2_000_000 and gzip.decompress(raw)[:200].strip()
    js = viewer_client.get(ours)
    assert js.headers["cache-control"] == "public, max-age=31536000, immutable"
    assert viewer_client.get("/static/js/wakeledger.js").headers["cache-control"] == "public, max-age=3600"


def test_api_answers_go_out_uncompressed_even_to_a_client_that_accepts_gzip(viewer_client, seeded):
    # Compressing a large numeric answer (a 25 MB planner scan) cost a second of server CPU.
    answer = viewer_client.get(f"/api/v1/campaigns/{SLUG}/shots?limit=50", headers={"Accept-Encoding": "gzip"})
    assert answer.status_code == 200 and len(answer.content) > 1000
    assert "content-encoding" not in answer.headers


def test_the_weekly_report_says_each_flag_sentence_once_then_lists_its_shots():
    when = datetime(2026, 11, 17, tzinfo=UTC)
    shots = [
        FlaggedShot(f"s-{i}", when, "marginal", [FlagRow(i, "UNSEEDED", "marginal", None, None, "no seed")])
        for i in range(30)
    ]
    groups = sentence_groups(shots)
    assert len(groups) == 1 and len(groups[0].shots) == 30 and groups[0].message == "no seed"


def test_settings_show_rounded_values_with_units(admin_client, seeded):
    html = admin_client.get(f"/campaigns/{SLUG}/settings").text
    assert not re.search(r'value="\d+\.\d{6,}"', html)  # e.g. 0.3142, not 0.3141592653589793
    assert "phase_tolerance_rad [rad]" in html


def test_saving_the_settings_form_untouched_changes_nothing(admin_client, seeded, db):
    from app.services.dashboard import settings_form

    campaign = _campaign(db)
    form = settings_form.settings_form(db, campaign)
    boxes = {f.name: f.text for f in form.model_fields}
    boxes.update({f.name: f.text for _code, _help, fields in form.limit_rows for f in fields})
    outcome = settings_form.save_settings(db, campaign, boxes, "test")
    assert not outcome.errors and not outcome.changed
