"""/docs in a real browser: Swagger UI from this server's own assets, under the pages' CSP."""

from __future__ import annotations

import pytest

pytestmark = pytest.mark.browser

_RECORD_CSP_VIOLATIONS = """
window.__cspViolations = [];
document.addEventListener("securitypolicyviolation", function (e) {
  window.__cspViolations.push(e.violatedDirective + " " + e.blockedURI);
});
"""


def test_the_api_docs_render_from_local_assets_without_csp_violations(browser, live_server, artifacts):
    context = browser.new_context(viewport={"width": 1280, "height": 900})
    page = context.new_page()
    page.add_init_script(_RECORD_CSP_VIOLATIONS)
    requests: list[str] = []
    errors: list[str] = []
    page.on("request", lambda req: requests.append(req.url))
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.goto(f"{live_server}/docs")
    page.wait_for_selector(".opblock-summary-path")
    assert page.locator(".opblock-summary-path").count() > 20
    assert page.evaluate("() => window.__cspViolations") == []
    assert errors == []
    assert all(url.startswith(live_server) or url.startswith("data:") for url in requests), requests
    page.screenshot(path=str(artifacts / "api-docs.png"))
    context.close()
