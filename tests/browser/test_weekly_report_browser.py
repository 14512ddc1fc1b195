"""The weekly page in a real browser: it runs nothing (sandboxed), yet its links still hand the
reader the week's files; the summary CSV link downloads the figures."""

from __future__ import annotations

import csv
import io

import httpx
import pytest

from app.services.weekly.summary_rows import SUMMARY_COLUMNS

pytestmark = pytest.mark.browser

WEEK = "2026-W47"


def test_a_reader_of_the_weekly_page_downloads_the_summary_csv_from_its_link(
    browser, live_server, admin_token, make_shot, artifacts
):
    headers = {"Authorization": f"Bearer {admin_token}"}
    with httpx.Client(base_url=live_server, headers=headers, timeout=30) as api:
        r = api.post("/api/v1/campaigns", json={"slug": "report-run", "name": "Report run", "timezone": "UTC"})
        assert r.status_code == 201, r.text
        shots = [make_shot(i % 3, shot_id=f"rp-{i:03d}", taken_at=f"2026-11-18T10:{i:02d}:00Z") for i in range(12)]
        r = api.post("/api/v1/campaigns/report-run/shots/batch", json={"shots": shots})
        assert r.status_code == 201, r.text
    context = browser.new_context(extra_http_headers=headers, accept_downloads=True)
    downloads = []
    context.on("page", lambda popup: popup.on("download", lambda d: downloads.append(d)))
    page = context.new_page()
    page.goto(f"{live_server}/api/v1/campaigns/report-run/summary?week={WEEK}&format=html")
    link = page.locator("#week-files a", has_text="these figures")
    assert link.count() == 1
    page.screenshot(path=str(artifacts / "weekly-report-files.png"), full_page=False)
    with context.expect_page():  # target=_blank: a popup, which leaves the page's sandbox
        link.click()
    deadline = 600
    while not downloads and deadline:
        page.wait_for_timeout(100)  # a bounded wait for the download event, not a timing assertion
        deadline -= 1
    assert downloads, "the summary CSV link gave no download"
    download = downloads[0]
    assert download.suggested_filename == "wakeledger-report-run-2026-W47-summary.csv"
    text = open(download.path(), encoding="utf-8").read()
    rows = list(csv.DictReader(io.StringIO(text)))
    assert tuple(rows[0]) == SUMMARY_COLUMNS
    assert {(r["section"], r["quantity"]): r["value"] for r in rows}[("counts", "shots")] == "12"
    context.close()
