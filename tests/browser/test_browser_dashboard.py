"""The dashboard in a real browser: sign in, overview, filter, one shot, live update."""

from __future__ import annotations

import httpx
import pytest

from app.presentation.numbers import format_number
from app.routers.deps import SESSION_COOKIE

pytestmark = pytest.mark.browser


# CSP violations that a library swallows (e.g. a refused eval) never reach the console.
_RECORD_CSP_VIOLATIONS = """
window.__cspViolations = [];
document.addEventListener("securitypolicyviolation", function (e) {
  window.__cspViolations.push(e.violatedDirective + " " + e.blockedURI);
});
"""


def _csp_violations(page) -> list[str]:
    return page.evaluate("() => window.__cspViolations || []")


def _watch_console(page) -> list[str]:
    page.add_init_script(_RECORD_CSP_VIOLATIONS)
    problems: list[str] = []
    page.on(
        "console",
        lambda msg: (
            problems.append(f"console {msg.type}: {msg.text}")
            if msg.type in ("error", "warning") and "WebGL" not in msg.text
            else None
        ),
    )
    page.on("pageerror", lambda exc: problems.append(f"page error: {exc}"))
    page.on("requestfailed", lambda req: _record_failed_request(req, problems))
    return problems


# Chromium's reason for a request the page itself gave up: a navigation (page.goto, a click on
# a link) cancels the live poll or a chart feed still in flight. That is not a failure of the
# server; a refused connection, a reset or a timeout (any other reason) still is.
ABORTED_BY_THE_PAGE = "net::ERR_ABORTED"


def _record_failed_request(request, problems: list[str]) -> None:
    reason = request.failure or "unknown reason"
    if reason != ABORTED_BY_THE_PAGE:
        problems.append(f"request failed ({reason}): {request.url}")


def test_shift_physicist_signs_in_filters_to_outside_shots_and_opens_one_with_its_growth_chart(
    browser, page_server, artifacts
):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1360, "height": 900})
    page = context.new_page()
    problems = _watch_console(page)
    outside_hosts: list[str] = []
    page.on("request", lambda req: outside_hosts.append(req.url) if not req.url.startswith(base) else None)

    page.goto(f"{base}/campaigns/{slug}")
    assert "/sign-in" in page.url
    page.screenshot(path=str(artifacts / "dashboard-sign-in.png"))
    page.fill("input[name=token]", page_server["token"])
    page.click("button[type=submit]")
    page.wait_for_url(f"{base}/campaigns/{slug}")

    page.wait_for_selector("#chart-timeline .plot-container svg")
    page.wait_for_selector("#chart-regime .plot-container")
    page.wait_for_selector("#chart-phase .plot-container")
    page.wait_for_selector("#chart-calibration .plot-container")
    assert page.locator(".caution").first.inner_text().startswith("Advisory only")
    assert page.locator("[data-count=outside]").inner_text() == "6"
    # Nominal shots are one line per panel (one SVG path); flagged and pinned shots are markers.
    markers = page.evaluate(
        "() => document.getElementById('chart-timeline').data"
        ".filter(t => t.mode === 'markers').reduce((n, t) => n + t.y.filter(v => v !== null).length, 0)"
    )
    assert page.locator("#chart-timeline .scatterlayer .point").count() == markers
    assert markers <= 5 * 9  # five panels of the 9 flagged shots at most (3 unseeded: no seed position)
    assert page.locator("#chart-timeline .scatterlayer .js-line").count() >= 5
    assert page.locator("#chart-regime .scatterlayer .point").count() == 36
    assert "not supported" not in page.locator("main").inner_text()
    assert "expected phase jitter" in page.locator("#facts-chart-phase").inner_text()
    assert "implied density offset" in page.locator("#facts-chart-calibration").inner_text()
    page.select_option("#regime-y", "hosing_ratio")
    page.wait_for_function(
        "() => document.getElementById('chart-regime').layout.yaxis.title.text.startsWith('hosing_ratio')"
    )
    page.screenshot(path=str(artifacts / "dashboard-overview.png"), full_page=True)
    assert _csp_violations(page) == []

    page.goto(f"{base}/campaigns/{slug}/shots")
    page.select_option("select[name=status]", "outside")
    page.click("form.filters button[type=submit]")
    page.wait_for_url("**status=outside**")
    statuses = page.locator("#shot-rows td:nth-child(3)").all_inner_texts()
    assert statuses and all(s.strip().endswith("outside") for s in statuses)
    page.screenshot(path=str(artifacts / "dashboard-shots-outside.png"), full_page=True)

    page.locator("#shot-rows a.mono").first.click()
    page.wait_for_selector("#chart-growth .plot-container svg")
    page.wait_for_selector("#chart-profile .plot-container svg")
    assert page.locator("h1 .status").inner_text().strip().endswith("outside")
    page.screenshot(path=str(artifacts / "dashboard-shot-detail.png"), full_page=True)
    assert _csp_violations(page) == []

    assert not outside_hosts, outside_hosts
    assert not problems, problems
    context.close()


def test_a_new_shot_appears_on_the_open_overview_and_table_without_a_reload(browser, page_server, artifacts):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1360, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    overview = context.new_page()
    problems = _watch_console(overview)
    overview.goto(f"{base}/campaigns/{slug}")
    overview.wait_for_selector("#chart-timeline .plot-container")
    table = context.new_page()
    problems += _watch_console(table)
    table.goto(f"{base}/campaigns/{slug}/shots")
    before = overview.locator("[data-count=outside]").inner_text()

    shot = page_server["make_shot"](1, shot_id="pg-live-1", taken_at="2026-11-17T12:00:00Z")
    r = httpx.post(f"{base}/api/v1/campaigns/{slug}/shots", json=shot, headers=page_server["headers"], timeout=30)
    assert r.status_code == 201, r.text

    overview.wait_for_function(
        "([n]) => document.querySelector('[data-count=outside]').textContent.trim() === String(n)",
        arg=[int(before) + 1],
    )
    table.wait_for_selector("#shot-rows tr:first-child a:text('pg-live-1')")
    # ... and at the top of the overview's latest outside shots, with its flags
    overview.wait_for_selector("#outside-rows tr:first-child a:text('pg-live-1')")
    assert overview.locator("#outside-rows tr:first-child .flag").count() >= 1
    traces = overview.evaluate(
        "() => document.getElementById('chart-timeline').data.filter(t => t.meta && t.meta.status === 'outside')"
        ".map(t => Array.from(t.customdata))"
    )
    assert all("pg-live-1" in ids for ids in traces)
    # The live row's text comes from the server's formatters: the same as the row the server renders.
    live_cells = table.locator("#shot-rows tr:first-child td").all_inner_texts()
    table.screenshot(path=str(artifacts / "dashboard-shots-live.png"))
    table.reload()
    table.wait_for_selector("#shot-rows tr:first-child a:text('pg-live-1')")
    served_cells = table.locator("#shot-rows tr:first-child td").all_inner_texts()
    assert [c.strip() for c in live_cells[1:-1]] == [c.strip() for c in served_cells[1:-1]]
    counts = table.evaluate("() => [0, 7, 9999, 10000, 1234567].map(window.wakeledgerFormatCount)")
    assert counts == [format_number(n) for n in (0, 7, 9999, 10000, 1234567)]
    assert not problems, problems
    context.close()


def test_admin_changes_a_limit_and_watches_the_reevaluation_finish(browser, page_server, artifacts):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1360, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    page = context.new_page()
    problems = _watch_console(page)
    page.goto(f"{base}/campaigns/{slug}/settings")
    page.fill("input[name='limit.HOSING_RISK.outside']", "not a number")
    page.click("#settings-form button[type=submit]")
    assert page.locator(".errors").is_visible()
    assert "must be a finite number" in page.locator(".errors").inner_text()
    # The refused form comes back as a 422 page, which chromium logs; nothing else may.
    problems[:] = [p for p in problems if "status of 422" not in p]
    page.screenshot(path=str(artifacts / "dashboard-settings-error.png"), full_page=True)
    page.fill("input[name='limit.HOSING_RISK.outside']", "1000")
    page.click("#settings-form button[type=submit]")
    page.wait_for_url("**/settings?job=**")
    page.wait_for_function("() => document.getElementById('job-text').textContent.includes('succeeded')")
    assert "36 of 36" in page.locator("#job-text").inner_text()
    page.screenshot(path=str(artifacts / "dashboard-settings-job.png"), full_page=True)
    assert _csp_violations(page) == []
    assert not problems, problems
    context.close()


# Every element inside a card ends inside the card (its right edge, with a pixel of rounding),
# and the page itself never scrolls sideways.
_OVERFLOW = """() => {
  const out = [];
  if (document.documentElement.scrollWidth > window.innerWidth + 1)
    out.push('page scrolls sideways: ' + document.documentElement.scrollWidth + ' > ' + window.innerWidth);
  document.querySelectorAll('main .card').forEach(card => {
    const box = card.getBoundingClientRect();
    if (card.scrollWidth > card.clientWidth + 1)
      out.push((card.querySelector('h2') || card).textContent.trim().slice(0, 40) + ': scrollWidth '
               + card.scrollWidth + ' > ' + card.clientWidth);
    card.querySelectorAll('*').forEach(el => {
      if (el.closest('.table-wrap') && el.closest('.table-wrap') !== el) return;  // scrolls inside its own box
      const r = el.getBoundingClientRect();
      if (r.width && r.right > box.right + 1)
        out.push(el.tagName + (el.id ? '#' + el.id : '') + ' ends at ' + Math.round(r.right)
                 + ' > card ' + Math.round(box.right));
    });
  });
  return out.slice(0, 10);
}"""


@pytest.mark.parametrize("width", [1400, 800])
def test_the_overview_fits_its_cards_at_1400_and_800_pixels(browser, page_server, artifacts, width):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": width, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    page = context.new_page()
    problems = _watch_console(page)
    page.goto(f"{base}/campaigns/{slug}")
    page.wait_for_function("() => window.wakeledgerChartsDrawn !== undefined")
    page.evaluate("() => window.wakeledgerChartsDrawn")
    page.wait_for_function("() => !document.querySelector('.chart.loading')")
    facts = page.locator("#facts-chart-phase")
    assert "expected phase jitter" in facts.inner_text()
    # The phase card's figures are visible: inside the card, not pushed out of it.
    card = page.locator("section[aria-labelledby=phase-h]").bounding_box()
    for dd in facts.locator("dd").all():
        box = dd.bounding_box()
        assert box and box["x"] + box["width"] <= card["x"] + card["width"] + 1
    page.screenshot(path=str(artifacts / f"dashboard-overview-{width}.png"), full_page=True)
    assert page.evaluate(_OVERFLOW) == []
    assert not problems, problems
    context.close()


class _FailedRequest:
    def __init__(self, url: str, failure: str | None) -> None:
        self.url, self.failure = url, failure


def test_a_live_poll_cancelled_by_leaving_the_page_is_not_counted_as_a_failure_but_a_refused_one_is():
    problems: list[str] = []
    _record_failed_request(
        _FailedRequest("http://127.0.0.1/api/v1/campaigns/x/live?since=3", "net::ERR_ABORTED"), problems
    )
    assert problems == []
    _record_failed_request(
        _FailedRequest("http://127.0.0.1/static/js/wakeledger.js", "net::ERR_CONNECTION_REFUSED"), problems
    )
    _record_failed_request(_FailedRequest("http://127.0.0.1/api/v1/campaigns/x/live", None), problems)
    assert problems == [
        "request failed (net::ERR_CONNECTION_REFUSED): http://127.0.0.1/static/js/wakeledger.js",
        "request failed (unknown reason): http://127.0.0.1/api/v1/campaigns/x/live",
    ]
