"""The overview of a large campaign (issue 16 goal 1): many nominal shots are drawn as one density
image, a flagged status past its cap as one marker per cell of the chart whose hover says how many
shots share it, wild values stay pinned at the edge, and the page's feeds count the campaign once.
The caps are lowered here so that the test campaign's 36 shots are "many". Nothing here is timed."""

from __future__ import annotations

import re

import pytest

from app.services.campaigns import find_campaign
from app.services.dashboard import figures, overview
from app.store import dashboard as store

SLUG = "test-campaign"


@pytest.fixture
def few_markers(monkeypatch):
    """Caps so low that the seeded campaign (27 nominal, 3 marginal, 6 outside) is past them."""
    monkeypatch.setattr(figures, "NOMINAL_MARKERS_MAX", 5)
    monkeypatch.setattr(figures, "FLAGGED_MARKERS_MAX", 2)
    monkeypatch.setattr(figures, "TIMELINE_FLAGGED_MARKERS_MAX", 2)


def _by_status(figure) -> dict[str, dict]:
    return {t["meta"]["status"]: t for t in figure["data"] if t.get("meta", {}).get("status") and t["x"]}


def _density(figure) -> dict:
    [image] = [t for t in figure["data"] if t["type"] == "heatmap"]
    return image


def _shots_in_cells(image) -> int:
    return sum(
        int(re.match(r"(?:about )?([\d,]+) nominal shots", t).group(1).replace(",", ""))
        for row in image["text"]
        for t in row
        if t
    )


def _stands_for(trace) -> list[int]:
    return [1 + int(re.search(r"and ([\d,]+) more", t).group(1).replace(",", "")) if t else 1 for t in trace["text"]]


@pytest.fixture
def wild(client, seeded, admin_headers, make_shot):
    """The seeded campaign and a shot whose beam size was posted in metres (a huge growth)."""
    metres = make_shot(shot_id="wrong-unit", taken_at="2026-11-17T20:00:00Z", changes={"driver.sigma_r_mm": 0.0002})
    assert client.post(f"/api/v1/campaigns/{seeded}/shots", json=metres, headers=admin_headers).status_code == 201
    return seeded


def test_many_nominal_shots_on_the_regime_map_are_one_density_image_counting_every_one(seeded, db, few_markers):
    figure = figures.regime_figure(db, find_campaign(db, SLUG), "plasma_density_cm3", "efolds_exit")
    image = _density(figure)
    assert _shots_in_cells(image) == 27  # every nominal shot is in a cell (none thinned at this size)
    assert image["name"].startswith("nominal (27 shots as a density")
    assert image["showscale"] is False and image["hoverongaps"] is False
    # New nominal shots from the live feed go to an empty marker trace drawn over the image.
    live = [t for t in figure["data"] if t.get("meta", {}).get("status") == "nominal" and t["type"] == "scatter"]
    assert len(live) == 1 and live[0]["x"] == [] and live[0]["meta"]["y"] == "efolds_exit"


def test_past_its_cap_a_flagged_status_is_one_marker_per_cell_standing_for_every_shot(seeded, db, few_markers):
    campaign = find_campaign(db, SLUG)
    regime = figures.regime_figure(db, campaign, "plasma_density_cm3", "efolds_exit")
    calibration = figures.calibration_figure(db, campaign)  # its outside shots have no measured frequency
    for figure, status, shots in ((regime, "outside", 6), (regime, "marginal", 3), (calibration, "marginal", 3)):
        trace = _by_status(figure)[status]
        assert len(trace["x"]) <= 2 and sum(_stands_for(trace)) == shots
        assert "one marker per cell" in trace["name"] and "%{text}" in trace["hovertemplate"]
        assert len(trace["customdata"]) == len(trace["x"])  # a marker still names its shot (hover, click)


def test_the_timeline_keeps_one_marker_per_cell_in_each_panel_past_the_cap(seeded, db, few_markers):
    figure = figures.timeline_figure(db, find_campaign(db, SLUG))
    panels = [t for t in figure["data"] if t.get("meta", {}).get("status") == "outside"]
    assert len(panels) == len(figures.TIMELINE_FIELDS)
    density = next(t for t in panels if t["meta"]["y"] == "plasma_density_cm3")
    assert len(density["x"]) <= 2 and sum(_stands_for(density)) == 6
    nominal = [t for t in figure["data"] if t.get("meta", {}).get("status") == "nominal"]
    assert all(t["mode"] == "lines" for t in nominal)  # nominal shots stay one line per panel


def test_the_phase_chart_draws_many_nominal_shots_as_one_line(seeded, db, few_markers):
    figure = figures.phase_figure(db, find_campaign(db, SLUG))
    nominal = next(t for t in figure["data"] if t.get("meta", {}).get("status") == "nominal")
    assert nominal["mode"] == "lines" and "marker" not in nominal
    marginal = _by_status(figure)["marginal"]
    assert len(marginal["x"]) <= 2 and sum(_stands_for(marginal)) == 3


def test_a_wild_beam_size_is_still_pinned_at_the_edge_of_a_map_drawn_as_a_density(wild, db, few_markers):
    figure = figures.regime_figure(db, find_campaign(db, SLUG), "plasma_density_cm3", "efolds_exit")
    [pinned] = [t for t in figure["data"] if t.get("meta", {}).get("pinned")]
    assert pinned["customdata"] == ["wrong-unit"] and "out of range" in pinned["hovertext"][0]
    y_range = figure["layout"]["yaxis"]["range"]
    image = _density(figure)
    assert max(image["y"]) <= y_range[1]  # the density covers the axes shown, not the wild value
    assert all("wrong-unit" not in t["customdata"] for t in figure["data"] if t.get("customdata") and t is not pinned)


def test_the_calibration_map_pins_a_frequency_posted_in_the_wrong_unit(client, seeded, admin_headers, make_shot, db):
    shot = make_shot(shot_id="mhz", taken_at="2026-11-17T20:00:00Z", changes={"measured.modulation_freq_ghz": 1796.0})
    assert client.post(f"/api/v1/campaigns/{seeded}/shots", json=shot, headers=admin_headers).status_code == 201
    figure = figures.calibration_figure(db, find_campaign(db, SLUG))
    [pinned] = [t for t in figure["data"] if t.get("meta", {}).get("pinned")]
    assert pinned["customdata"] == ["mhz"] and "1796" in pinned["hovertext"][0]
    assert figure["layout"]["yaxis"]["range"][1] < 1000  # the other shots are not flattened
    line = figure["data"][0]
    assert line["name"] == "measured = predicted"
    shown = [x for t in figure["data"][1:] for x in t.get("x") or [] if x is not None]
    assert line["x"][0] <= min(shown) and line["x"][1] >= max(shown)  # across the predicted frequencies shown


def test_the_overviews_feeds_count_the_campaign_once_for_all_their_charts(seeded, db, monkeypatch):
    campaign = find_campaign(db, SLUG)
    calls = []
    counting = store.counts_with_values_of
    monkeypatch.setattr(store, "counts_with_values_of", lambda *a, **k: calls.append(1) or counting(*a, **k))
    for name in ("timeline", "phase", "calibration"):
        overview.chart_feed(db, campaign, name)
    overview.regime_feed(db, campaign, *figures.DEFAULT_REGIME_AXES)
    assert calls == [1]
    legend = {
        t["meta"]["status"]: t["name"]
        for t in overview.chart_feed(db, campaign, "phase")["figure"]["data"]
        if t.get("meta", {}).get("status")
    }
    assert legend["marginal"] == "marginal (3)" and legend["nominal"] == "nominal (27)"  # the shared counts
