"""The settings page's alerts panel: an admin lists, adds and deletes targets with the page's
forms (CSRF as every form), and reads the log of recent deliveries."""

from __future__ import annotations

import re

from tests.support.jobs import run_queued_jobs
from tests.support.receiver import alert_receiver

SLUG = "test-campaign"
SETTINGS = f"/campaigns/{SLUG}/settings"


def _add(client, url: str, statuses=("outside",), flags=(), csrf: str | None = None, **headers: str):
    data = {"url": url, "statuses": list(statuses), "flags": list(flags), "csrf_token": csrf or client.csrf_token}
    return client.post(SETTINGS + "/webhooks", data=data, headers=headers, follow_redirects=False)


def _target_ids(html: str) -> list[int]:
    return [int(i) for i in re.findall(r'<tr data-target="(\d+)">', html)]


def test_an_admin_adds_a_target_on_the_settings_page_sees_it_listed_and_deletes_it(admin_client, campaign):
    page = admin_client.get(SETTINGS)
    assert page.status_code == 200 and 'id="alerts"' in page.text and "No targets" in page.text
    response = _add(admin_client, "http://127.0.0.1:9000/alerts", statuses=["outside", "marginal"], flags=["WEAK_SEED"])
    assert response.status_code == 303 and response.headers["location"].endswith("/settings#alerts")
    page = admin_client.get(SETTINGS).text
    [target_id] = _target_ids(page)
    assert "http://127.0.0.1:9000/alerts" in page and "outside, marginal" in page and "WEAK_SEED" in page

    delete = f"{SETTINGS}/webhooks/{target_id}/delete"
    gone = admin_client.post(delete, data={"csrf_token": admin_client.csrf_token}, follow_redirects=False)
    assert gone.status_code == 303
    assert _target_ids(admin_client.get(SETTINGS).text) == []
    again = admin_client.post(delete, data={"csrf_token": admin_client.csrf_token}, follow_redirects=False)
    assert again.status_code == 404


def test_a_bad_url_on_the_form_is_shown_beside_the_box_keeps_the_choices_and_adds_nothing(admin_client, campaign):
    response = _add(admin_client, "ftp://127.0.0.1/alerts", statuses=["marginal"], flags=["HOSING_RISK"])
    assert response.status_code == 422
    assert "The target was not added" in response.text and "http:// or https://" in response.text
    assert 'value="ftp://127.0.0.1/alerts"' in response.text
    assert re.search(r'value="marginal" checked', response.text) and re.search(
        r'value="HOSING_RISK" checked', response.text
    )
    nothing = _add(admin_client, "http://127.0.0.1/a", statuses=[], flags=[])
    assert nothing.status_code == 422 and "at least one status or one flag code" in nothing.text
    assert _target_ids(admin_client.get(SETTINGS).text) == []


def test_the_alert_forms_refuse_a_post_without_the_sessions_csrf_token_or_from_another_site(admin_client, campaign):
    assert _add(admin_client, "http://127.0.0.1/a", csrf="guessed").status_code == 403
    assert _add(admin_client, "http://127.0.0.1/a", Origin="http://elsewhere.invalid").status_code == 403
    assert _target_ids(admin_client.get(SETTINGS).text) == []


def test_a_viewer_cannot_add_targets_from_the_settings_page(viewer_client, campaign):
    assert _add(viewer_client, "http://127.0.0.1/a").status_code == 403


def test_the_delivery_log_shows_time_target_shot_status_code_and_attempt(
    admin_client, app, campaign, ingest_headers, make_shot
):
    with alert_receiver(answers=[500]) as receiver:
        assert _add(admin_client, receiver.url).status_code == 303
        admin_client.post(f"/api/v1/campaigns/{SLUG}/shots", json=make_shot("ex-2"), headers=ingest_headers)
        run_queued_jobs(app)
        receiver.wait_for(1)
    page = admin_client.get(SETTINGS).text
    log = page[page.index('id="alert-deliveries"') :]
    row = re.search(r'<tr data-outcome="retrying">(.*?)</tr>', log, re.S)
    assert row is not None, log[:2000]
    cells = row.group(1)
    assert receiver.url in cells and f"/campaigns/{SLUG}/shots/ex-2" in cells
    assert ">500<" in cells and "HTTP 500" in cells and re.search(r'<td class="num">1</td>', cells)
