"""The token life cycle (create with expiry, list, revoke; CLI, API and page), last use,
browser sessions ended with their token, the audit view, rate limits, and
authentication before a large body is read."""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta

from sqlalchemy import update

from app.cli import main
from app.routers.deps import SESSION_COOKIE
from app.services.auth import create_token, resolve_session
from app.tables import ApiToken
from tests.support.sessions import new_session, page_csrf, sign_in


def _bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _expire(app, token_id: int) -> None:
    with app.state.session_factory() as session:
        session.execute(
            update(ApiToken).where(ApiToken.id == token_id).values(expires_at=datetime.now(UTC) - timedelta(seconds=1))
        )
        session.commit()


# --- the API ------------------------------------------------------------------------------------------


def test_an_admin_creates_lists_and_revokes_a_token_over_the_api(client, campaign, admin_headers):
    created = client.post(
        "/api/v1/tokens", json={"name": "daq-line-3", "role": "ingest", "expires_in_days": 30}, headers=admin_headers
    )
    assert created.status_code == 201
    body = created.json()
    token, token_id = body["token"], body["id"]
    assert token.startswith("wlt_") and body["state"] == "active" and body["expires_at"] is not None
    assert client.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(token)).status_code == 200
    listed = {t["id"]: t for t in client.get("/api/v1/tokens", headers=admin_headers).json()["items"]}
    assert listed[token_id]["last_used_at"] is not None
    assert "token" not in listed[token_id]  # never shown again
    revoked = client.delete(f"/api/v1/tokens/{token_id}", headers=admin_headers).json()
    assert revoked["state"] == "revoked"
    assert client.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(token)).status_code == 401


def test_an_expired_token_is_refused_and_listed_as_expired(client, app, campaign, admin_headers):
    body = client.post("/api/v1/tokens", json={"name": "short", "role": "viewer"}, headers=admin_headers).json()
    _expire(app, body["id"])
    response = client.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(body["token"]))
    assert response.status_code == 401 and "expired" in response.json()["detail"]
    listed = {t["id"]: t for t in client.get("/api/v1/tokens", headers=admin_headers).json()["items"]}
    assert listed[body["id"]]["state"] == "expired"


def test_only_admins_handle_tokens_and_read_the_audit_trail(client, ingest_headers, viewer_headers):
    for headers in (ingest_headers, viewer_headers):
        assert client.get("/api/v1/tokens", headers=headers).status_code == 403
        assert client.post("/api/v1/tokens", json={"name": "x", "role": "admin"}, headers=headers).status_code == 403
        assert client.get("/api/v1/audit", headers=headers).status_code == 403


def test_the_audit_trail_lists_every_write_newest_first_and_pages_back(client, campaign, admin_headers, make_shot):
    client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(), headers=admin_headers)
    client.patch(f"/api/v1/campaigns/{campaign}/settings", json={"noise_floor": 0.002}, headers=admin_headers)
    page = client.get("/api/v1/audit", params={"campaign": campaign, "limit": 2}, headers=admin_headers).json()
    assert [e["action"] for e in page["items"]] == ["campaign.settings", "shots.ingest"]
    assert page["items"][0]["actor"] == "token:test-admin"
    older = client.get(
        "/api/v1/audit", params={"campaign": campaign, "before": page["next_before"]}, headers=admin_headers
    ).json()
    assert [e["action"] for e in older["items"]] == ["campaign.create"]
    tokens = client.get("/api/v1/audit", params={"action": "token."}, headers=admin_headers).json()["items"]
    assert tokens and all(e["action"].startswith("token.") for e in tokens)


# --- sessions -----------------------------------------------------------------------------------------


def test_revoking_a_token_ends_its_browser_sessions(client, app, admin_headers, viewer_token):
    made = new_session(app, viewer_token)
    with app.state.session_factory() as session:
        who = resolve_session(session, made.cookie_value)
    assert who is not None and who.name == "test-viewer"
    client.delete(f"/api/v1/tokens/{who.token_id}", headers=admin_headers)
    client.cookies.set(SESSION_COOKIE, made.cookie_value)
    response = client.get("/campaigns", follow_redirects=False)
    assert response.status_code == 303 and response.headers["location"].startswith("/sign-in")


def test_a_browser_write_through_the_session_needs_the_csrf_header(client, campaign, ingest_token, make_shot):
    csrf = sign_in(client, ingest_token)
    url = f"/api/v1/campaigns/{campaign}/shots"
    refused = client.post(url, json=make_shot(shot_id="csrf-1"))
    assert refused.status_code == 403 and "X-CSRF-Token" in refused.json()["detail"]
    assert client.post(url, json=make_shot(shot_id="csrf-1"), headers={"X-CSRF-Token": csrf}).status_code == 201


def test_a_session_never_outlives_its_token(client, app, admin_headers):
    body = client.post(
        "/api/v1/tokens", json={"name": "brief", "role": "viewer", "expires_in_days": 0.001}, headers=admin_headers
    ).json()
    made = new_session(app, body["token"])
    assert made.expires_at <= datetime.fromisoformat(body["expires_at"].replace("Z", "+00:00"))


# --- the admin page -----------------------------------------------------------------------------------


def test_the_admin_page_creates_a_token_shows_it_once_and_revokes_it(client, admin_token, campaign):
    sign_in(client, admin_token)
    csrf = page_csrf(client, "/admin")
    page = client.post("/admin/tokens", data={"name": "shift-screen", "role": "viewer", "csrf_token": csrf})
    assert page.status_code == 200
    token = re.search(r'id="new-token-value">(wlt_[^<]+)<', page.text).group(1)
    assert client.get("/admin").text.count(token) == 0  # shown once
    token_id = int(re.search(r'action="/admin/tokens/(\d+)/revoke"', page.text).group(1))
    assert client.post(f"/admin/tokens/{token_id}/revoke", data={}).status_code == 403  # no CSRF token
    client.post(f"/admin/tokens/{token_id}/revoke", data={"csrf_token": csrf})
    assert client.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(token)).status_code == 401


def test_the_admin_page_shows_jobs_and_the_audit_trail_and_cancels_a_job(
    client, admin_token, admin_headers, campaign, make_shot
):
    client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(shot_id="admin-1"), headers=admin_headers)
    job_id = client.post(f"/api/v1/campaigns/{campaign}/shots/admin-1/detailed-runs", headers=admin_headers).json()[
        "job_id"
    ]
    sign_in(client, admin_token)
    page = client.get("/admin").text
    assert "detailed_run" in page and f"/admin/jobs/{job_id}/cancel" in page
    assert "shots.ingest" in page and "token:test-admin" in page
    client.post(f"/admin/jobs/{job_id}/cancel", data={"csrf_token": page_csrf(client, "/admin")})
    assert client.get(f"/api/v1/jobs/{job_id}", headers=admin_headers).json()["state"] == "cancelled"


def test_the_admin_page_is_for_admins_only(client, viewer_token):
    sign_in(client, viewer_token)
    assert client.get("/admin").status_code == 403
    assert 'href="/admin"' not in client.get("/campaigns").text


# --- the CLI ------------------------------------------------------------------------------------------


def test_the_cli_creates_an_expiring_token_lists_and_revokes_it(database_url, capsys):
    assert main(["--database-url", database_url, "token", "create", "--role", "ingest", "--name", "daq-9",
                 "--expires-in", "90d"]) == 0  # fmt: skip
    token = capsys.readouterr().out.strip()
    assert token.startswith("wlt_")
    assert main(["--database-url", database_url, "token", "list"]) == 0
    listing = capsys.readouterr().out
    line = next(row for row in listing.splitlines() if "daq-9" in row)
    assert "active" in line and "ingest" in line and token not in listing
    token_id = line.split()[0]
    assert main(["--database-url", database_url, "token", "revoke", token_id]) == 0
    assert f"token {token_id} (daq-9, ingest) is revoked" in capsys.readouterr().err
    main(["--database-url", database_url, "token", "list", "--active"])
    assert "daq-9" not in capsys.readouterr().out


def test_the_cli_refuses_an_unreadable_expiry(database_url, capsys):
    import pytest

    with pytest.raises(SystemExit):
        main(
            [
                "--database-url",
                database_url,
                "token",
                "create",
                "--role",
                "viewer",
                "--name",
                "x",
                "--expires-in",
                "soon",
            ]
        )
    assert "not a duration" in capsys.readouterr().err


# --- rate limits and the order of checks -------------------------------------------------------------


def test_past_its_write_budget_a_token_gets_429_with_retry_after(settings, campaign, make_shot, ingest_token):
    from starlette.testclient import TestClient

    from app.main import create_app

    strict = create_app(settings.model_copy(update={"rate_limit_writes": "3/minute"}))
    try:
        with TestClient(strict) as limited:
            url = f"/api/v1/campaigns/{campaign}/shots"
            codes = [
                limited.post(url, json=make_shot(shot_id=f"rl-{i}"), headers=_bearer(ingest_token)).status_code
                for i in range(3)
            ]
            assert codes == [201, 201, 201]
            last = limited.post(url, json=make_shot(shot_id="rl-9"), headers=_bearer(ingest_token))
            assert last.status_code == 429
            assert int(last.headers["retry-after"]) >= 1
            assert last.headers["content-type"].startswith("application/problem+json")
            # reads are not writes
            assert limited.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(ingest_token)).status_code == 200
    finally:
        strict.state.engine.dispose()


def test_downloads_have_their_own_budget_per_token(settings, campaign, viewer_token):
    from starlette.testclient import TestClient

    from app.main import create_app

    strict = create_app(settings.model_copy(update={"rate_limit_expensive_reads": "2/minute"}))
    try:
        with TestClient(strict) as limited:
            summary = f"/api/v1/campaigns/{campaign}/summary?week=2026-W47&format=csv"
            assert limited.get(summary, headers=_bearer(viewer_token)).status_code == 200
            sign_in(limited, viewer_token)
            assert limited.get(f"/campaigns/{campaign}/shots.csv").status_code == 200
            refused = limited.get(summary, headers=_bearer(viewer_token))
            assert refused.status_code == 429 and "downloads" in refused.json()["detail"]
            assert limited.get(f"/api/v1/campaigns/{campaign}", headers=_bearer(viewer_token)).status_code == 200
    finally:
        strict.state.engine.dispose()


def test_a_large_body_without_a_token_is_refused_before_it_is_read(client, campaign, ingest_headers):
    huge = b"x" * (17 * 1024 * 1024)
    url = f"/api/v1/campaigns/{campaign}/shots/batch"
    response = client.post(url, content=huge, headers={"Content-Type": "application/json"})
    assert response.status_code == 401
    wrong = client.post(url, content=huge, headers={"Content-Type": "application/json", **_bearer("wlt_wrong")})
    assert wrong.status_code == 401
    assert (
        client.post(url, content=huge, headers={"Content-Type": "application/json", **ingest_headers}).status_code
        == 413
    )


def test_last_use_is_kept_to_the_minute(app, admin_token):
    with app.state.session_factory() as session:
        raw = create_token(session, "viewer", "minute", actor="tests")
    from app.services.auth import list_tokens, resolve_token

    with app.state.session_factory() as session:
        resolve_token(session, raw)
        first = next(t for t in list_tokens(session) if t.name == "minute").last_used_at
        resolve_token(session, raw)
        second = next(t for t in list_tokens(session) if t.name == "minute").last_used_at
    assert first is not None and first == second
