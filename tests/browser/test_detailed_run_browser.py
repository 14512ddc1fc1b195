"""The detailed-run panel in a real browser: start a run, follow it, see the charts without a reload,
then see the stored run again after one."""

from __future__ import annotations

import httpx
import pytest

from tests.support.detailed_runs import QUICK_CHANGES
from tests.support.jobs import TEST_WORKER

pytestmark = pytest.mark.browser


def test_admin_starts_a_detailed_run_from_the_shot_page_and_sees_its_charts_without_a_reload(
    browser, live_server, admin_token, make_shot, artifacts, job_worker
):
    job_worker(**TEST_WORKER)  # the run is solved by a worker process, as beside `wakeledger serve`
    headers = {"Authorization": f"Bearer {admin_token}"}
    with httpx.Client(base_url=live_server, headers=headers, timeout=30) as api:
        assert api.post("/api/v1/campaigns", json={"slug": "panel", "name": "Panel campaign"}).status_code == 201
        shot = make_shot("ex-1", shot_id="quick-1", changes=QUICK_CHANGES)
        assert api.post("/api/v1/campaigns/panel/shots", json=shot).status_code == 201

    context = browser.new_context(viewport={"width": 1360, "height": 1000})
    page = context.new_page()
    problems: list[str] = []
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("console", lambda msg: problems.append(f"console: {msg.text}") if msg.type == "error" else None)
    page.goto(f"{live_server}/sign-in?next=/campaigns/panel/shots/quick-1")
    page.fill("input[name=token]", admin_token)
    page.click("button[type=submit]")
    page.wait_for_url(f"{live_server}/campaigns/panel/shots/quick-1")
    assert page.locator("#detailed-run-empty").is_visible()
    page.evaluate("window.__notReloaded = true")

    page.click("#detailed-run-form button[type=submit]")
    page.wait_for_selector("#chart-detailed-map .main-svg")
    page.wait_for_selector("#chart-detailed-growth .main-svg")
    page.wait_for_selector("#chart-detailed-field .main-svg")
    assert page.evaluate("window.__notReloaded") is True
    assert "Detailed run finished" in page.inner_text("#detailed-run-job-text")
    assert "valid" in page.inner_text("#detailed-run-validity-text")
    assert page.locator("#detailed-run-facts dt").count() >= 5
    page.locator("#detailed-run").screenshot(path=str(artifacts / "detailed-run-panel.png"))

    page.reload()  # the stored run is drawn from the page's own data block
    page.wait_for_selector("#chart-detailed-map .main-svg")
    assert page.locator("#detailed-run-empty").is_hidden()
    assert problems == []
    context.close()
