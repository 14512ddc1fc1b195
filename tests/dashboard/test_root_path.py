"""Served under a path prefix behind a reverse proxy (WAKELEDGER_ROOT_PATH=/wakeledger): every
link, script, form, feed and redirect a page gives the browser starts with the prefix, whether
the proxy strips the prefix or passes it on."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from tests.support.sessions import sign_in

PREFIX = "/wakeledger"
STATIC_JS = Path(__file__).resolve().parents[2] / "app" / "static" / "js"
TEMPLATES = Path(__file__).resolve().parents[2] / "app" / "templates"
# Every attribute that makes the browser ask for a URL, and every "..._url"/"url"/"feeds" value of
# the pages' JSON configuration blocks.
_ATTR = re.compile(r'\b(?:href|src|action|data-feed|data-openapi-url)="([^"]*)"')
_JSON_BLOCK = re.compile(r'<script type="application/json"[^>]*>(.*?)</script>', re.S)


@pytest.fixture
def settings(database_url: str):
    from app.config import Settings

    return Settings(database_url=database_url, migrate_on_start=False, demo_mode=False, root_path=PREFIX + "/")


def _urls_in_json(value, key: str = "") -> list[str]:
    if isinstance(value, dict):
        return [u for k, v in value.items() for u in _urls_in_json(v, k)]
    if isinstance(value, list):
        return [u for v in value for u in _urls_in_json(v, key)]
    if isinstance(value, str) and (key == "url" or key.endswith("_url") or key in ("map", "panels", "point")):
        return [value]
    return []


def _site_urls(html: str) -> list[str]:
    urls = [u for u in _ATTR.findall(html)]
    for block in _JSON_BLOCK.findall(html):
        urls += _urls_in_json(json.loads(block))
    return [u for u in urls if u.startswith("/")]  # "#anchors", "?query" and data: stay as they are


def _unprefixed(html: str) -> list[str]:
    return [u for u in _site_urls(html) if not (u == PREFIX or u.startswith(PREFIX + "/"))]


def test_every_page_links_scripts_forms_and_feeds_behind_the_prefix(client, admin_token, seeded, admin_headers):
    slug = seeded
    shot_id = client.get(f"/api/v1/campaigns/{slug}/shots", headers=admin_headers).json()["items"][0]["shot_id"]
    sign_in(client, admin_token)
    pages = [
        "/campaigns",
        f"/campaigns/{slug}",
        f"/campaigns/{slug}/shots",
        f"/campaigns/{slug}/shots?status=outside",
        f"/campaigns/{slug}/shots/{shot_id}",
        f"/campaigns/{slug}/plan",
        f"/campaigns/{slug}/plan?shot={shot_id}",
        f"/campaigns/{slug}/settings",
        "/admin",
        "/campaigns/no-such-campaign",
        "/docs",
    ]
    for path in pages:
        for asked in (path, PREFIX + path):  # the proxy strips the prefix, or passes it on
            page = client.get(asked)
            assert page.status_code in (200, 404), (asked, page.status_code)
            assert _site_urls(page.text), asked
            assert _unprefixed(page.text) == [], asked


def test_the_sign_in_redirect_and_form_stay_behind_the_prefix(client, admin_token, seeded):
    answer = client.get(f"{PREFIX}/campaigns/{seeded}/shots?status=outside", follow_redirects=False)
    assert answer.status_code == 303
    assert answer.headers["location"].startswith(f"{PREFIX}/sign-in?next=")
    assert "%2Fcampaigns%2F" in answer.headers["location"] and "%2Fwakeledger" not in answer.headers["location"]
    form = client.get(f"{PREFIX}/sign-in")
    assert _unprefixed(form.text) == []
    nonce = re.search(r'name="nonce" value="([^"]+)"', form.text).group(1)
    signed = client.post(
        f"{PREFIX}/sign-in",
        data={"token": admin_token, "nonce": nonce, "next": f"/campaigns/{seeded}"},
        headers={"Origin": "http://testserver"},
        follow_redirects=False,
    )
    assert signed.status_code == 303, signed.text
    assert signed.headers["location"] == f"{PREFIX}/campaigns/{seeded}"


def test_the_live_feed_links_new_shots_behind_the_prefix(client, admin_token, seeded):
    sign_in(client, admin_token)
    live = client.get(f"{PREFIX}/campaigns/{seeded}/live?since=0").json()
    assert PREFIX + f"/campaigns/{seeded}/shots/" in json.dumps(live)


def test_no_template_or_script_writes_a_site_absolute_address_of_its_own():
    """Templates write {{ root }}/...; scripts prefix the ROOT they read from <html data-root>."""
    for template in TEMPLATES.rglob("*.html"):
        for url in _ATTR.findall(template.read_text(encoding="utf-8")):
            assert not url.startswith("/"), f"{template.name}: {url}"
    for script in STATIC_JS.glob("*.js"):
        text = script.read_text(encoding="utf-8")
        bare = re.findall(r'(?<!ROOT \+ )"(/(?:api|campaigns|static|assets|admin|sign-)[^"]*)"', text)
        assert bare == [], f"{script.name}: {bare}"
