"""The calibration page in a real browser: it draws the scale series (per day and per run), one
log-log scatter per scaling check and the drivers chart under the page's CSP with no script error,
every axis title inside its chart at several widths, a click on a shot the model does not explain
opens that shot's page, and an admin applies the estimate after a confirmation (dismissing it
changes nothing)."""

from __future__ import annotations

import time
from datetime import UTC, datetime

import httpx
import pytest

from tests.support.calibration_shots import shots_from_columns, synthetic_columns

pytestmark = pytest.mark.browser

SLUG = "calib-run"


@pytest.fixture
def calibration_server(live_server: str, admin_token: str, reference_cases, job_worker) -> dict[str, str]:
    job_worker()
    columns = synthetic_columns(reference_cases[0]["input"], 300, scale=1.015, scale_after=1.03, step_at=180, seed=2)
    columns["measured.halo_radius_mm"][[77]] *= 3.0
    shots = shots_from_columns(columns, datetime(2026, 11, 16, 8, tzinfo=UTC), every_s=900)
    for i, shot in enumerate(shots):
        shot["daq"] = {"run": 500 + i // 40}  # runs of 40 shots
    with httpx.Client(base_url=live_server, headers={"Authorization": f"Bearer {admin_token}"}, timeout=60) as api:
        assert (
            api.post("/api/v1/campaigns", json={"slug": SLUG, "name": "Calibration run", "timezone": "UTC"}).status_code
            == 201
        )
        assert api.post(f"/api/v1/campaigns/{SLUG}/shots/batch", json={"shots": shots}).status_code == 201
    return {"base": live_server, "token": admin_token}


def _wait_until(page, function: str, arg=None, timeout_s: float = 120.0) -> None:
    """Poll a condition in the page (wait_for_function would evaluate a string, which the page's CSP forbids)."""
    deadline = time.monotonic() + timeout_s
    while not page.evaluate(function, arg):
        assert time.monotonic() < deadline, f"timed out waiting for {function}"
        page.wait_for_timeout(100)


POINT_PIXELS = """([id, trace, i]) => {
  const gd = document.getElementById(id);
  const xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
  const x = gd.data[trace].x[i], y = gd.data[trace].y[i];
  return { px: xa._offset + xa.l2p(xa.d2l(x)), py: ya._offset + ya.l2p(ya.d2l(y)), name: gd.data[trace].customdata[i] };
}"""


def test_the_page_draws_its_charts_opens_an_odd_shot_and_applies_the_scale_after_confirmation(
    browser, calibration_server, artifacts
):
    base = calibration_server["base"]
    path = f"/campaigns/{SLUG}/calibration"
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    page = context.new_page()
    problems: list[str] = []
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("console", lambda msg: problems.append(f"console: {msg.text}") if msg.type == "error" else None)
    page.goto(f"{base}/sign-in?next={path}")
    page.fill("input[name=token]", calibration_server["token"])
    page.click("button[type=submit]")
    page.wait_for_url(f"{base}{path}", timeout=120000)
    _wait_until(page, "() => document.body.dataset.chartsDrawn === '6'")
    assert page.locator("#calib-changes tbody tr").count() == 1
    runs = page.evaluate("() => document.getElementById('chart-calib-series').data[0]")
    assert runs["name"].startswith("per run, by daq.run") and len(runs["x"]) == 8
    assert page.locator("#chart-calib-series .scatterlayer .trace").nth(0).locator("path.point").count() == 8
    assert page.locator("nav a[aria-current=page]").inner_text() == "Calibration"
    page.screenshot(path=str(artifacts / "calibration-page.png"), full_page=True)

    # the halo check (the second scatter) marks shot cal-00077 as not explained; a click opens it
    halo = page.locator("#chart-scaling-1")
    halo.scroll_into_view_if_needed()
    outlier_trace = page.evaluate("() => document.getElementById('chart-scaling-1').data.length - 1")
    names = page.evaluate(f"() => document.getElementById('chart-scaling-1').data[{outlier_trace}].customdata")
    point = page.evaluate(POINT_PIXELS, ["chart-scaling-1", outlier_trace, names.index("cal-00077")])
    box = halo.bounding_box()
    page.mouse.move(box["x"] + point["px"], box["y"] + point["py"])
    page.mouse.click(box["x"] + point["px"], box["y"] + point["py"])
    page.wait_for_url(f"{base}/campaigns/{SLUG}/shots/cal-00077", timeout=120000)
    page.go_back()
    page.wait_for_url(f"{base}{path}", timeout=120000)
    _wait_until(page, "() => document.body.dataset.chartsDrawn === '6'")

    # dismissing the confirmation changes nothing; accepting it applies the estimate through the settings
    page.once("dialog", lambda dialog: dialog.dismiss())
    page.click("#calib-apply")
    page.wait_for_timeout(300)
    assert page.inner_text("#calib-apply-result") == ""
    shown = page.get_attribute("#calib-apply", "data-scale")
    shown_text = page.get_attribute("#calib-apply", "data-text")
    messages: list[str] = []

    def accept(dialog):
        messages.append(dialog.message)
        dialog.accept()

    page.once("dialog", accept)
    page.click("#calib-apply")
    _wait_until(page, "() => !!document.getElementById('calib-apply-result').dataset.applied")
    assert shown_text in messages[0] and "re-evaluated" in messages[0]
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {calibration_server['token']}"}) as api:
        settings = api.get(f"/api/v1/campaigns/{SLUG}").json()["effective_settings"]
    assert settings["density_scale"] == float(shown)
    assert problems == []
    context.close()


# Every axis title's box (the text as laid out, before the chart's clipping) against its chart's box.
TITLES_OUTSIDE = """() => {
  const found = [], outside = [];
  const titles = 'g[class^="g-x"][class$="title"] text, g[class^="g-y"][class$="title"] text';
  for (const div of document.querySelectorAll('div.chart')) {
    const box = div.getBoundingClientRect();
    for (const t of div.querySelectorAll(titles)) {
      if (!t.textContent) continue;
      const r = t.getBoundingClientRect();
      found.push(div.id);
      const inside = r.left >= box.left - 0.5 && r.right <= box.right + 0.5
        && r.top >= box.top - 0.5 && r.bottom <= box.bottom + 0.5;
      if (!inside) {
        const left = Math.round(r.left - box.left), right = Math.round(r.right - box.left);
        outside.push(`${div.id}: ${t.textContent} (${left}..${right} of ${Math.round(box.width)})`);
      }
    }
  }
  return { found: found.length, outside };
}"""


@pytest.mark.parametrize("width", [1400, 1000, 760])
def test_every_axis_title_lies_inside_its_chart(browser, calibration_server, artifacts, width):
    base = calibration_server["base"]
    path = f"/campaigns/{SLUG}/calibration"
    context = browser.new_context(viewport={"width": width, "height": 1000})
    page = context.new_page()
    page.goto(f"{base}/sign-in?next={path}")
    page.fill("input[name=token]", calibration_server["token"])
    page.click("button[type=submit]")
    page.wait_for_url(f"{base}{path}", timeout=120000)
    _wait_until(page, "() => document.body.dataset.chartsDrawn === '6'")
    titles = page.evaluate(TITLES_OUTSIDE)
    page.screenshot(path=str(artifacts / f"calibration-page-{width}.png"), full_page=True)
    assert titles["found"] == 11  # an x and a y title on each of the six charts but the drivers' y
    assert titles["outside"] == []
    context.close()
