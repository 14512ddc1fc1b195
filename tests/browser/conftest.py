"""Browser fixtures: Debian chromium driven by Playwright against a real uvicorn.

The server is the ``live_server`` fixture of tests/conftest.py (127.0.0.1, free port,
temp SQLite), one per test; chromium is launched once per test module and each test opens
contexts of its own (``browser``). ``page_server`` seeds the server through the API with the
shots of tests/support/page_shots.py and starts a job worker beside it. Screenshots go to
test-artifacts/ (gitignored).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.support.jobs import TEST_WORKER
from tests.support.page_shots import page_shots
from tests.support.sessions import new_session

CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


# How long a page may take to show what a test waits for (a chart drawn, a job finished): a bound
# on a wait for a condition, never a timing assertion. Generous, because the suite must pass on
# a 2-core machine shared with other CPU-bound work, where a job worker runs at a lower priority.
WAIT_MS = 120_000


class _Browser:
    """The launched chromium, whose contexts wait up to WAIT_MS (Playwright's default is 30 s)
    and are closed at the end of the test that opened them, whatever happened in it."""

    def __init__(self, chromium: Any) -> None:
        self._chromium = chromium
        self.opened: list[Any] = []

    def new_context(self, **options: Any) -> Any:
        context = self._chromium.new_context(**options)
        context.set_default_timeout(WAIT_MS)
        self.opened.append(context)
        return context

    def __getattr__(self, name: str) -> Any:
        return getattr(self._chromium, name)


@pytest.fixture(scope="module")
def _chromium() -> Iterator[Any]:
    """One chromium per test module (launching it is the slow part); tests share none of its state."""
    if not CHROMIUM.exists():
        reason = "browser tests need Debian chromium at /usr/bin/chromium (.ci/run installs it)"
        if os.environ.get("WAKELEDGER_REQUIRE_BROWSER"):
            pytest.fail(reason + "; WAKELEDGER_REQUIRE_BROWSER is set")
        pytest.skip(reason)
    sync_api = pytest.importorskip("playwright.sync_api", reason="browser tests need playwright")
    with sync_api.sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            yield chromium
        finally:
            chromium.close()


@pytest.fixture
def browser(_chromium: Any) -> Iterator[_Browser]:
    """The module's chromium; each test opens contexts of its own (cookies, storage, pages)."""
    wrapped = _Browser(_chromium)
    try:
        yield wrapped
    finally:
        for context in wrapped.opened:
            context.close()  # a no-op for one the test closed itself


@pytest.fixture
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture
def backend() -> str:
    """Browser tests run on SQLite only (the pages' SQL is covered on both in tests/dashboard)."""
    return "sqlite"


@pytest.fixture
def page_server(app, live_server: str, admin_token: str, make_shot, job_worker) -> dict[str, Any]:
    job_worker(**TEST_WORKER)  # the jobs the pages start run in a worker process, as beside `wakeledger serve`
    headers = {"Authorization": f"Bearer {admin_token}"}
    with httpx.Client(base_url=live_server, headers=headers, timeout=30) as api:
        r = api.post(
            "/api/v1/campaigns",
            json={"slug": "browser-run", "name": "Browser run campaign", "timezone": "Europe/Berlin"},
        )
        assert r.status_code == 201, r.text
        shots = page_shots(make_shot)
        r = api.post("/api/v1/campaigns/browser-run/shots/batch", json={"shots": shots})
        assert r.status_code == 201, r.text
    return {
        "base": live_server,
        "token": admin_token,
        "session": new_session(app, admin_token).cookie_value,  # a signed-in browser's cookie
        "slug": "browser-run",
        "headers": headers,
        "make_shot": make_shot,
    }
