"""The overview's opt-in notice of outside shots: off by default; once switched on, an outside
shot arriving through the live feed gives a desktop notice (or, where notices are not
permitted, a short beep), and a nominal one gives none."""

from __future__ import annotations

import httpx
import pytest

from app.routers.deps import SESSION_COOKIE

pytestmark = pytest.mark.browser

# A stand-in for the browser's Notification API that records what the page shows.
_RECORD_NOTICES = """
window.__notices = [];
window.Notification = function (title, options) { window.__notices.push([title, (options || {}).body]); };
window.Notification.permission = "granted";
window.Notification.requestPermission = function () { return Promise.resolve("granted"); };
"""


def _post(page_server, shot_id: str, case: int, minute: int) -> None:
    shot = page_server["make_shot"](case, shot_id=shot_id, taken_at=f"2026-11-17T13:{minute:02d}:00Z")
    base, slug = page_server["base"], page_server["slug"]
    r = httpx.post(f"{base}/api/v1/campaigns/{slug}/shots", json=shot, headers=page_server["headers"], timeout=30)
    assert r.status_code == 201, r.text


def test_a_physicist_switches_on_the_notice_and_an_outside_shot_gives_one_a_nominal_none_or_a_beep(
    browser, page_server, artifacts
):
    base, slug = page_server["base"], page_server["slug"]
    context = browser.new_context(viewport={"width": 1360, "height": 900})
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    context.add_init_script(_RECORD_NOTICES)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    page.goto(f"{base}/campaigns/{slug}")
    box = page.locator("#outside-alert")
    assert not box.is_checked()  # off by default

    _post(page_server, "quiet-outside", 1, 1)  # outside, but nobody asked for a notice
    page.wait_for_function("() => document.querySelector('[data-count=total]').textContent.trim() === '37'")
    assert page.evaluate("() => window.__notices.length") == 0

    box.check()  # the waits below are bounded by the context timeout (WAIT_MS), like every wait here
    assert "desktop notice" in page.locator("#outside-alert-mode").inner_text()
    _post(page_server, "calm-1", 0, 2)  # nominal
    _post(page_server, "wild-1", 1, 3)  # outside
    page.wait_for_function("() => window.__notices.length > 0")
    [[title, body]] = page.evaluate("() => window.__notices")
    assert "wild-1" in title and body
    page.screenshot(path=str(artifacts / "overview-outside-notice.png"))

    page.reload()  # the choice is kept in this browser
    assert page.locator("#outside-alert").is_checked()
    assert not errors, errors
    context.close()

    # A browser without the Notification API: the notice is a short beep, and nothing breaks.
    context = browser.new_context()
    context.add_cookies([{"name": SESSION_COOKIE, "value": page_server["session"], "url": base}])
    context.add_init_script("try { delete window.Notification; } catch (e) {} window.Notification = undefined;")
    page = context.new_page()
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.goto(f"{base}/campaigns/{slug}")
    page.locator("#outside-alert").check()
    _post(page_server, "beep-1", 1, 4)
    page.wait_for_function("() => document.getElementById('outside-alert').dataset.noticed === '1'")
    assert "beep" in page.locator("#outside-alert-mode").inner_text()
    assert not errors, errors
    context.close()
