"""The overview of a large campaign in a real browser: nominal shots of the regime and calibration
maps are one density image each, a flagged status past its cap is one marker per cell, a new shot
from the live feed joins those markers, and the log axes redraw the image. The caps are lowered so
that the test campaign's 36 shots are "many" (the server runs in this process)."""

from __future__ import annotations

import httpx
import pytest

from app.routers.deps import SESSION_COOKIE
from app.services.dashboard import figures

pytestmark = pytest.mark.browser

# Shots drawn as markers (one SVG path each) against those the chart's traces hold.
_MARKERS = """(id) => {
  const div = document.getElementById(id);
  const held = div.data.filter(t => t.type === 'scatter' && t.mode === 'markers')
    .reduce((n, t) => n + t.y.filter(v => v !== null).length, 0);
  return {drawn: div.querySelectorAll('.scatterlayer .point').length, held: held,
          images: div.querySelectorAll('.heatmaplayer image').length,
          legend: Array.from(div.querySelectorAll('.legendtext')).map(n => n.textContent)};
}"""

_OUTSIDE_IDS = """(id) => document.getElementById(id).data
  .filter(t => t.meta && t.meta.status === 'outside').flatMap(t => Array.from(t.customdata))"""


@pytest.fixture
def few_markers(monkeypatch):
    monkeypatch.setattr(figures, "NOMINAL_MARKERS_MAX", 5)
    monkeypatch.setattr(figures, "FLAGGED_MARKERS_MAX", 2)
    monkeypatch.setattr(figures, "TIMELINE_FLAGGED_MARKERS_MAX", 2)


def test_a_physicist_reads_a_large_campaigns_maps_as_densities_with_flagged_shots_on_top(
    browser, page_server, artifacts, few_markers
):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1400, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    page = context.new_page()
    problems: list[str] = []
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("console", lambda msg: problems.append(msg.text) if msg.type in ("error", "warning") else None)
    page.goto(f"{base}/campaigns/{slug}")
    page.wait_for_function("() => window.wakeledgerChartsDrawn !== undefined")
    page.evaluate("() => window.wakeledgerChartsDrawn")
    page.wait_for_function("() => !document.querySelector('.chart.loading')")

    for chart in ("chart-regime", "chart-calibration"):
        seen = page.evaluate(_MARKERS, chart)
        assert seen["images"] == 1, chart  # the nominal shots: one image
        assert seen["drawn"] == seen["held"] and seen["held"] <= 2 + 2 + 1, seen  # two statuses, a pin at most
        assert any("as a density" in text for text in seen["legend"]), seen["legend"]
        assert any("one marker per cell" in text for text in seen["legend"]), seen["legend"]
    timeline = page.evaluate(_MARKERS, "chart-timeline")
    assert timeline["drawn"] == timeline["held"] <= 2 * 2 * len(figures.TIMELINE_FIELDS) + 5
    page.screenshot(path=str(artifacts / "overview-many-shots.png"), full_page=True)

    # A new outside shot arrives: it joins the outside markers of the regime map (which stand
    # for cells of shots) as a marker of its own.
    shot = page_server["make_shot"](1, shot_id="late-wide", taken_at="2026-11-17T13:00:00Z")
    r = httpx.post(f"{base}/api/v1/campaigns/{slug}/shots", json=shot, headers=page_server["headers"], timeout=30)
    assert r.status_code == 201, r.text
    page.wait_for_function(f"() => ({_OUTSIDE_IDS})('chart-regime').includes('late-wide')")
    assert "late-wide" in page.evaluate(_OUTSIDE_IDS, "chart-timeline")

    # Log axes: the density is drawn again on them.
    page.check("#regime-logy")
    page.wait_for_function("() => document.getElementById('chart-regime').layout.yaxis.type === 'log'")
    assert page.evaluate(_MARKERS, "chart-regime")["images"] == 1
    page.screenshot(path=str(artifacts / "overview-many-shots-log.png"))
    assert not problems, problems
    context.close()


_HEIGHTS = """() => Array.from(document.querySelectorAll('.chart')).map(div => [div.id,
  Math.round(div.getBoundingClientRect().height), div._fullLayout ? Math.round(div._fullLayout.height) : null])"""


def test_every_chart_keeps_its_height_when_the_window_is_resized(browser, page_server, artifacts):
    # Plotly's responsive mode dropped each chart's height on a resize and fitted it to its box,
    # which had shrunk to the CSS minimum: the timeline spilled over the regime map's controls.
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1400, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    page = context.new_page()
    page.goto(f"{base}/campaigns/{slug}")
    page.wait_for_function("() => window.wakeledgerChartsDrawn !== undefined")
    page.evaluate("() => window.wakeledgerChartsDrawn")
    page.wait_for_function("() => !document.querySelector('.chart.loading')")
    drawn = {name: height for name, height, _ in page.evaluate(_HEIGHTS)}
    assert drawn["chart-timeline"] > 900
    page.set_viewport_size({"width": 1100, "height": 800})
    page.wait_for_function(
        "([h]) => Math.round(document.getElementById('chart-timeline')._fullLayout.width) < h", arg=[1300]
    )
    for name, box, plot in page.evaluate(_HEIGHTS):
        assert box == drawn[name] and plot == box, (name, box, plot, drawn[name])
    page.screenshot(path=str(artifacts / "overview-resized.png"), full_page=True)
    context.close()
