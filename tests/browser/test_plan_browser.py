"""The planner in a real browser: the page draws the status map, a click on a point shows that point's
evaluation, a change of the axes redraws it, the nearest nominal shot becomes the new base at a click,
and the HTML file of `wakeledger plan` draws its map with no network at all."""

from __future__ import annotations

import json
import time
from pathlib import Path

import httpx
import pytest

from app.cli import main
from tests.support.plans import failing, planned

pytestmark = pytest.mark.browser


def _open(browser, base: str, token: str, path: str):
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    page = context.new_page()
    problems: list[str] = []
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("console", lambda msg: problems.append(f"console: {msg.text}") if msg.type == "error" else None)
    page.goto(f"{base}/sign-in?next={path}")
    page.fill("input[name=token]", token)
    page.click("button[type=submit]")
    page.wait_for_url(f"{base}{path}")
    return context, page, problems


def _drawn(page) -> int:
    return int(page.get_attribute("#chart-plan", "data-drawn") or 0)


def _wait_until(page, function: str, arg=None, timeout_s: float = 30.0) -> None:
    """Poll a condition in the page (wait_for_function would evaluate a string, which the page's CSP forbids)."""
    deadline = time.monotonic() + timeout_s
    while not page.evaluate(function, arg):
        assert time.monotonic() < deadline, f"timed out waiting for {function}"
        page.wait_for_timeout(100)


REDRAWN = "(n) => Number(document.getElementById('chart-plan').dataset.drawn) > n"


CELL_PIXELS = """([i, j]) => {
  const gd = document.getElementById("chart-plan");
  const xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
  const x = gd.data[0].x[i], y = gd.data[0].y[j];
  return { x: x, y: y, px: xa._offset + xa.l2p(xa.d2l(x)), py: ya._offset + ya.l2p(ya.d2l(y)) };
}"""


def test_the_page_draws_the_map_and_a_click_on_a_point_shows_its_evaluation(browser, page_server, artifacts):
    base, slug = page_server["base"], page_server["slug"]
    context, page, problems = _open(browser, base, page_server["token"], f"/campaigns/{slug}/plan?shot=pg-0000")
    page.wait_for_selector("#chart-plan[data-drawn] .heatmaplayer image", state="attached")
    page.wait_for_selector("#plan-base[data-drawn]")
    assert page.locator("#plan-windows tr.window").count() > 0
    assert page.locator("#plan-sensitivities tr").count() > 0
    assert page.inner_text("#plan-summary").startswith("80 \u00d7 80 points")

    chart = page.locator("#chart-plan")
    chart.scroll_into_view_if_needed()
    cell = page.evaluate(CELL_PIXELS, [20, 55])
    box = chart.bounding_box()
    page.mouse.move(box["x"] + cell["px"], box["y"] + cell["py"])
    page.wait_for_selector("#chart-plan .hoverlayer .hovertext")
    page.mouse.click(box["x"] + cell["px"], box["y"] + cell["py"])
    page.wait_for_selector("#plan-point[data-shown]")

    with httpx.Client(base_url=base, headers=page_server["headers"], timeout=30) as api:
        payload = api.get(f"/api/v1/campaigns/{slug}/shots/pg-0000").json()["payload"]
        point = planned(payload, {"plasma.density_cm3": cell["x"], "seed.position_mm": cell["y"]})
        expected = api.post("/api/v1/evaluate", params={"campaign": slug}, json=point).json()
    assert page.inner_text("#plan-point-status").strip().endswith(expected["status"])
    codes = page.locator("#plan-point-flags td.mono").all_inner_texts()
    assert codes == [f["code"] for f in expected["flags"]]
    assert "plasma.density_cm3 [cm^-3] = " in page.inner_text("#plan-point-values")
    page.locator("#plan-point").screenshot(path=str(artifacts / "plan-point.png"))

    drawn = _drawn(page)
    page.fill('.plan-axis[data-axis="0"] [name=steps]', "12")
    _wait_until(page, REDRAWN, drawn)
    _wait_until(page, "() => document.getElementById('plan-summary').textContent.startsWith('12 \u00d7 80 points')")
    page.screenshot(path=str(artifacts / "plan-page.png"), full_page=True)
    assert problems == []
    context.close()


def test_the_nearest_nominal_shot_becomes_the_new_base_at_a_click(
    browser, live_server, admin_token, make_shot, artifacts
):
    shot = make_shot("ex-1", shot_id="near-1")
    headers = {"Authorization": f"Bearer {admin_token}"}
    with httpx.Client(base_url=live_server, headers=headers, timeout=30) as api:
        # the base passes every rule but one, which it fails at 0.7 of its own density ratio
        settings = failing(shot, NONLINEAR_DRIVE=0.7)
        created = api.post("/api/v1/campaigns", json={"slug": "nearest", "name": "Nearest", "settings": settings})
        assert created.status_code == 201, created.text
        assert api.post("/api/v1/campaigns/nearest/shots", json=shot).status_code == 201
    context, page, problems = _open(browser, live_server, admin_token, "/campaigns/nearest/plan?shot=near-1")
    page.wait_for_selector("#plan-base[data-drawn]")
    page.wait_for_selector("#chart-plan[data-drawn]")
    assert page.inner_text("#plan-base-status").strip().endswith("marginal")
    vary = page.eval_on_selector_all("#plan-vary input:checked", "boxes => boxes.map(b => b.value)")
    assert "plasma.density_cm3" in vary
    with httpx.Client(base_url=live_server, headers=headers, timeout=30) as api:
        body = {"base": {"campaign": "nearest", "shot_id": "near-1"}, "vary": vary}
        nearest = api.post("/api/v1/plans/nearest", json=body).json()
    assert nearest["found"] and nearest["status"] == "nominal"

    page.wait_for_selector("#plan-nearest-use:not([disabled])")
    drawn = _drawn(page)
    page.click("#plan-nearest-use")
    _wait_until(page, REDRAWN, drawn)
    _wait_until(page, "() => document.getElementById('plan-base-status').textContent.trim().endsWith('nominal')")
    for path, value in nearest["inputs"].items():
        assert float(page.input_value(f'#plan-fields [data-path="{path}"]')) == value
    assert page.locator("#plan-base-edited").is_visible()
    marker = page.evaluate(
        "() => document.getElementById('chart-plan').data.find(t => t.meta && t.meta.plan === 'base').x[0]"
    )
    assert marker == nearest["inputs"]["plasma.density_cm3"]
    page.screenshot(path=str(artifacts / "plan-nearest.png"), full_page=True)
    assert problems == []
    context.close()


def test_the_html_file_of_a_plan_draws_its_map_with_no_network(browser, tmp_path: Path, make_shot, artifacts):
    shot_file = tmp_path / "shot.json"
    shot_file.write_text(json.dumps(make_shot("ex-1")))
    out = tmp_path / "plan.html"
    axes = ["--vary", "plasma.density_cm3=1e14:1e15:30:log", "--vary", "seed.position_mm=-70:140:20"]
    assert main(["plan", str(shot_file), *axes, "--out", str(out)]) == 0
    context = browser.new_context(viewport={"width": 1200, "height": 900})
    requested: list[str] = []

    def only_the_file(route):
        if route.request.url.startswith("file://"):
            route.continue_()
        else:
            requested.append(route.request.url)
            route.abort()

    context.route("**/*", only_the_file)
    page = context.new_page()
    page.goto(out.as_uri())
    page.wait_for_selector("#chart-plan .main-svg")
    assert page.locator("#chart-plan .heatmaplayer image").count() == 1
    assert page.locator("#plan-windows tr.window").count() > 0
    page.screenshot(path=str(artifacts / "plan-file.png"), full_page=True)
    assert requested == []
    context.close()
