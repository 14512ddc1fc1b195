"""A DAQ engineer excludes a test or junk shot with a reason: it is kept and shown, and
left out of every count, chart and summary until it is restored."""

from __future__ import annotations

import csv
import io

import pytest

from tests.support.jobs import run_queued_jobs
from tests.support.sessions import sign_in

WEEK = "2026-W47"  # the week of make_shot's taken_at (2026-11-17)


def _shots(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots"


def _exclusion(campaign: str, shot_id: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots/{shot_id}/exclusion"


@pytest.fixture
def three_shots(client, campaign, ingest_headers, make_shot) -> list[str]:
    """Three stored shots of week 2026-W47; the last one is the test shot."""
    ids = ["daq-001", "daq-002", "test-pulse-003"]
    for i, shot_id in enumerate(ids):
        shot = make_shot(0, shot_id=shot_id, taken_at=f"2026-11-17T09:0{i}:00Z")
        assert client.post(_shots(campaign), json=shot, headers=ingest_headers).status_code == 201
    return ids


def _listed(client, campaign, headers, **params) -> list[str]:
    response = client.get(_shots(campaign), params=params, headers=headers)
    assert response.status_code == 200, response.text
    return [item["shot_id"] for item in response.json()["items"]]


def _weekly(client, campaign, headers) -> dict:
    response = client.get(f"/api/v1/campaigns/{campaign}/summary", params={"week": WEEK}, headers=headers)
    assert response.status_code == 200, response.text
    return response.json()


def _csv_rows(client, campaign, headers, **params) -> list[dict[str, str]]:
    response = client.get(f"/campaigns/{campaign}/shots.csv", params=params, headers=headers)
    assert response.status_code == 200, response.text
    return list(csv.DictReader(io.StringIO(response.text)))


def _live_total(client, campaign, headers) -> int:
    response = client.get(f"/campaigns/{campaign}/live", headers=headers)
    assert response.status_code == 200, response.text
    return sum(response.json()["counts"].values())


def test_an_excluded_test_shot_leaves_the_counts_the_weekly_summary_and_the_csv_and_comes_back_when_restored(
    client, campaign, three_shots, ingest_headers, viewer_headers
):
    assert _live_total(client, campaign, viewer_headers) == 3
    response = client.post(
        _exclusion(campaign, "test-pulse-003"), json={"reason": "test pulse, no plasma"}, headers=ingest_headers
    )
    assert response.status_code == 201, response.text
    state = response.json()
    assert state["shot_id"] == "test-pulse-003"
    assert state["excluded"] is True
    assert state["excluded_reason"] == "test pulse, no plasma"
    assert state["excluded_by"] == "token:test-ingest"
    assert state["excluded_at"].endswith("Z")

    # counts: the overview's live counts, the campaign's shot count
    assert _live_total(client, campaign, viewer_headers) == 2
    assert client.get(f"/api/v1/campaigns/{campaign}", headers=viewer_headers).json()["shot_count"] == 2
    # the weekly summary (JSON) and its CSV
    weekly = _weekly(client, campaign, viewer_headers)
    assert weekly["summary"]["shot_count"] == 2
    assert weekly["summary"]["excluded_count"] == 1
    assert [s["shot_id"] for s in weekly["shots"]] == ["daq-001", "daq-002"]
    week_csv = client.get(
        f"/api/v1/campaigns/{campaign}/summary", params={"week": WEEK, "format": "csv"}, headers=viewer_headers
    )
    assert "test-pulse-003" not in week_csv.text
    week_html = client.get(
        f"/api/v1/campaigns/{campaign}/summary", params={"week": WEEK, "format": "html"}, headers=viewer_headers
    ).text
    assert "test-pulse-003" not in week_html
    assert "1 excluded shot of this week" in week_html
    metrics = client.get("/metrics", headers=viewer_headers).text
    assert 'wakeledger_shot_exclusions_total{action="exclude"}' in metrics
    # the shot table's CSV and the API list
    assert [r["shot_id"] for r in _csv_rows(client, campaign, viewer_headers)] == ["daq-002", "daq-001"]
    assert "excluded_reason" not in _csv_rows(client, campaign, viewer_headers)[0]
    assert _listed(client, campaign, viewer_headers) == ["daq-001", "daq-002"]

    # listed when asked, and marked
    assert _listed(client, campaign, viewer_headers, excluded="include") == three_shots
    assert _listed(client, campaign, viewer_headers, excluded="only") == ["test-pulse-003"]
    rows = {r["shot_id"]: r for r in _csv_rows(client, campaign, viewer_headers, excluded="include")}
    assert set(rows) == set(three_shots)
    assert rows["test-pulse-003"]["excluded_reason"] == "test pulse, no plasma"
    assert rows["test-pulse-003"]["excluded_at"].endswith("Z")
    assert rows["daq-001"]["excluded_reason"] == rows["daq-001"]["excluded_at"] == ""
    shot = client.get(f"{_shots(campaign)}/test-pulse-003", headers=viewer_headers).json()
    assert (shot["excluded"], shot["excluded_reason"], shot["excluded_by"]) == (
        True,
        "test pulse, no plasma",
        "token:test-ingest",
    )
    assert shot["evaluation"] is not None  # kept, with its evaluation

    # restoring brings it back everywhere
    response = client.delete(_exclusion(campaign, "test-pulse-003"), headers=ingest_headers)
    assert response.status_code == 200, response.text
    assert response.json() == {
        "shot_id": "test-pulse-003",
        "excluded": False,
        "excluded_at": None,
        "excluded_reason": None,
        "excluded_by": None,
    }
    assert _live_total(client, campaign, viewer_headers) == 3
    assert _weekly(client, campaign, viewer_headers)["summary"]["shot_count"] == 3
    assert _weekly(client, campaign, viewer_headers)["summary"]["excluded_count"] == 0
    assert len(_csv_rows(client, campaign, viewer_headers)) == 3
    assert _listed(client, campaign, viewer_headers) == three_shots


def test_a_viewer_may_neither_exclude_nor_restore_a_shot(client, campaign, three_shots, viewer_headers):
    url = _exclusion(campaign, "daq-001")
    response = client.post(url, json={"reason": "looks odd"}, headers=viewer_headers)
    assert response.status_code == 403
    assert response.headers["content-type"].startswith("application/problem+json")
    assert client.delete(url, headers=viewer_headers).status_code == 403
    assert client.get(f"{_shots(campaign)}/daq-001", headers=viewer_headers).json()["excluded"] is False


def test_the_audit_trail_records_who_excluded_and_who_restored_a_shot_and_why(
    client, campaign, three_shots, ingest_headers, admin_headers
):
    client.post(_exclusion(campaign, "daq-002"), json={"reason": "density posted in m^-3"}, headers=ingest_headers)
    client.delete(_exclusion(campaign, "daq-002"), headers=admin_headers)
    entries = client.get("/api/v1/audit", params={"action": "shot.", "campaign": campaign}, headers=admin_headers)
    assert entries.status_code == 200, entries.text
    found = [(e["action"], e["actor"], e["target"], e["detail"]) for e in entries.json()["items"]]
    assert found == [
        (
            "shot.restore",
            "token:test-admin",
            "daq-002",
            {"was_excluded_because": "density posted in m^-3", "was_excluded_by": "token:test-ingest"},
        ),
        ("shot.exclude", "token:test-ingest", "daq-002", {"reason": "density posted in m^-3"}),
    ]


def test_excluding_is_no_revision_of_the_conditions(client, campaign, three_shots, ingest_headers, viewer_headers):
    client.post(_exclusion(campaign, "daq-001"), json={"reason": "test shot"}, headers=ingest_headers)
    shot = client.get(f"{_shots(campaign)}/daq-001", headers=viewer_headers).json()
    assert shot["revision"] == 1
    revisions = client.get(f"{_shots(campaign)}/daq-001/revisions", headers=viewer_headers).json()["items"]
    assert [r["revision"] for r in revisions] == [1]


@pytest.mark.parametrize(
    ("body", "reason"),
    [
        ({"reason": ""}, "must not be empty"),
        ({"reason": "   "}, "must not be empty"),
        ({"reason": "x" * 501}, "at most 500 characters"),
        ({"reason": "two\nlines"}, "control characters"),
        ({}, "Field required"),
        ({"reason": "ok", "extra": 1}, "Extra inputs"),
    ],
)
def test_an_exclusion_without_a_usable_reason_is_a_422_naming_the_field_and_changes_nothing(
    client, campaign, three_shots, ingest_headers, viewer_headers, body, reason
):
    response = client.post(_exclusion(campaign, "daq-001"), json=body, headers=ingest_headers)
    assert response.status_code == 422, response.text
    errors = response.json()["errors"]
    assert any(reason in e["reason"] for e in errors), errors
    assert {e["field"] for e in errors} <= {"reason", "extra"}
    assert client.get(f"{_shots(campaign)}/daq-001", headers=viewer_headers).json()["excluded"] is False


def test_excluding_or_restoring_an_unknown_shot_is_a_404(client, campaign, three_shots, ingest_headers):
    assert client.post(_exclusion(campaign, "no-such"), json={"reason": "x"}, headers=ingest_headers).status_code == 404
    assert client.delete(_exclusion(campaign, "no-such"), headers=ingest_headers).status_code == 404
    assert (
        client.post(_exclusion("no-campaign", "daq-001"), json={"reason": "x"}, headers=ingest_headers).status_code
        == 404
    )


def test_excluding_twice_with_the_same_reason_is_a_harmless_replay_and_with_another_reason_a_409(
    client, campaign, three_shots, ingest_headers, admin_headers
):
    url = _exclusion(campaign, "daq-001")
    first = client.post(url, json={"reason": "test shot"}, headers=ingest_headers)
    again = client.post(url, json={"reason": " test shot "}, headers=ingest_headers)
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.json() == first.json()
    other = client.post(url, json={"reason": "wrong units"}, headers=ingest_headers)
    assert other.status_code == 409, other.text
    assert other.json()["errors"] == [{"field": "reason", "reason": "the shot is excluded because: test shot"}]
    # restoring a shot that is not excluded changes nothing (and is not audited)
    assert client.delete(url, headers=ingest_headers).status_code == 200
    assert client.delete(url, headers=ingest_headers).json()["excluded"] is False
    actions = [
        e["action"]
        for e in client.get("/api/v1/audit", params={"action": "shot."}, headers=admin_headers).json()["items"]
    ]
    assert actions == ["shot.restore", "shot.exclude"]


def test_an_unknown_excluded_choice_on_the_list_is_a_422_naming_it(client, campaign, three_shots, viewer_headers):
    response = client.get(_shots(campaign), params={"excluded": "all"}, headers=viewer_headers)
    assert response.status_code == 422
    assert "excluded" in response.json()["errors"][0]["field"]
    table = client.get(f"/campaigns/{campaign}/shots", params={"excluded": "all"}, headers=viewer_headers)
    assert table.status_code == 422 and "choose one of omit, include, only" in table.text


def test_a_shot_still_cannot_be_deleted(client, campaign, three_shots, admin_headers, viewer_headers):
    response = client.delete(f"{_shots(campaign)}/daq-001", headers=admin_headers)
    assert response.status_code == 405
    assert client.get(f"{_shots(campaign)}/daq-001", headers=viewer_headers).status_code == 200


def test_a_re_evaluation_still_evaluates_an_excluded_shot(
    app, client, campaign, three_shots, ingest_headers, admin_headers, viewer_headers
):
    client.post(_exclusion(campaign, "test-pulse-003"), json={"reason": "test pulse"}, headers=ingest_headers)
    response = client.patch(
        f"/api/v1/campaigns/{campaign}/settings", json={"density_scale": 1.01}, headers=admin_headers
    )
    assert response.status_code == 202, response.text
    run_queued_jobs(app)
    shot = client.get(f"{_shots(campaign)}/test-pulse-003", headers=viewer_headers).json()
    assert shot["excluded"] is True
    assert shot["evaluation"]["settings_version"] == 2


# --- the shot page ---------------------------------------------------------------------------------


def _page(client, campaign, shot_id):
    return client.get(f"/campaigns/{campaign}/shots/{shot_id}")


def test_an_ingest_session_excludes_a_shot_from_its_page_and_the_page_shows_the_banner_then_restores_it(
    client, campaign, three_shots, ingest_token, admin_headers
):
    csrf = sign_in(client, ingest_token)
    page = _page(client, campaign, "test-pulse-003")
    assert 'id="exclude-form"' in page.text and 'id="excluded-banner"' not in page.text
    response = client.post(
        f"/campaigns/{campaign}/shots/test-pulse-003/exclude",
        data={"csrf_token": csrf, "reason": "test pulse, no plasma"},
        follow_redirects=False,
    )
    assert response.status_code == 303, response.text
    assert response.headers["location"] == f"/campaigns/{campaign}/shots/test-pulse-003"
    page = _page(client, campaign, "test-pulse-003")
    assert 'id="excluded-banner"' in page.text
    assert "test pulse, no plasma" in page.text and "by token:test-ingest" in page.text
    assert 'id="restore-form"' in page.text and 'id="exclude-form"' not in page.text
    table = client.get(f"/campaigns/{campaign}/shots", params={"excluded": "include"})
    assert 'class="excluded"' in table.text and "excluded-mark" in table.text
    assert "test-pulse-003" not in client.get(f"/campaigns/{campaign}/shots").text
    overview = client.get(f"/campaigns/{campaign}")
    assert 'id="excluded-note"' in overview.text and "shots?excluded=only" in overview.text

    response = client.post(
        f"/campaigns/{campaign}/shots/test-pulse-003/restore", data={"csrf_token": csrf}, follow_redirects=False
    )
    assert response.status_code == 303
    assert 'id="excluded-banner"' not in _page(client, campaign, "test-pulse-003").text
    actions = [
        e["action"]
        for e in client.get("/api/v1/audit", params={"action": "shot."}, headers=admin_headers).json()["items"]
    ]
    assert actions == ["shot.restore", "shot.exclude"]


def test_the_page_form_refuses_an_empty_reason_and_a_post_without_the_csrf_token(
    client, campaign, three_shots, ingest_token, viewer_headers
):
    csrf = sign_in(client, ingest_token)
    url = f"/campaigns/{campaign}/shots/daq-001/exclude"
    empty = client.post(url, data={"csrf_token": csrf, "reason": "  "}, follow_redirects=False)
    assert empty.status_code == 422
    assert 'id="exclusion-errors"' in empty.text and "must not be empty" in empty.text
    nul = client.post(url, data={"csrf_token": csrf, "reason": "junk\x00"}, follow_redirects=False)
    assert nul.status_code == 422 and "control characters" in nul.text
    forged = client.post(url, data={"reason": "junk"}, follow_redirects=False)
    assert forged.status_code == 403
    assert client.get(f"{_shots(campaign)}/daq-001", headers=viewer_headers).json()["excluded"] is False


def test_a_viewer_session_sees_the_banner_but_no_exclude_or_restore_button(
    client, campaign, three_shots, ingest_headers, viewer_token
):
    client.post(_exclusion(campaign, "daq-002"), json={"reason": "wrong units"}, headers=ingest_headers)
    csrf = sign_in(client, viewer_token)
    excluded = _page(client, campaign, "daq-002").text
    assert 'id="excluded-banner"' in excluded and "wrong units" in excluded
    assert 'id="restore-form"' not in excluded
    assert 'id="exclude-form"' not in _page(client, campaign, "daq-001").text
    refused = client.post(
        f"/campaigns/{campaign}/shots/daq-002/restore", data={"csrf_token": csrf}, follow_redirects=False
    )
    assert refused.status_code == 403
