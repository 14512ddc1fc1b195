"""Roles hold on every route: the table below names the role of each route of the app,
a test fails when a route is added without a line here, and every route is tried
without a token and with each weaker role."""

from __future__ import annotations

import pytest
from fastapi.routing import APIRoute

from app.services.auth import ROLES
from tests.support.sessions import sign_in

# (method, path) -> the role it needs; "public" needs none; pages answer a sign-in redirect.
API_ROUTES = {
    ("GET", "/api/v1/campaigns"): "viewer",
    ("POST", "/api/v1/campaigns"): "admin",
    ("GET", "/api/v1/campaigns/{slug}"): "viewer",
    ("PATCH", "/api/v1/campaigns/{slug}/settings"): "admin",
    ("GET", "/api/v1/jobs"): "admin",
    ("GET", "/api/v1/jobs/{job_id}"): "viewer",
    ("DELETE", "/api/v1/jobs/{job_id}"): "viewer",  # and the submitter or an admin (the service checks)
    ("GET", "/api/v1/tokens"): "admin",
    ("POST", "/api/v1/tokens"): "admin",
    ("DELETE", "/api/v1/tokens/{token_id}"): "admin",
    ("GET", "/api/v1/audit"): "admin",
    ("POST", "/api/v1/campaigns/{slug}/shots"): "ingest",
    ("POST", "/api/v1/campaigns/{slug}/shots/batch"): "ingest",
    ("GET", "/api/v1/campaigns/{slug}/shots"): "viewer",
    ("GET", "/api/v1/campaigns/{slug}/shots/{shot_id}"): "viewer",
    ("PUT", "/api/v1/campaigns/{slug}/shots/{shot_id}"): "ingest",
    ("GET", "/api/v1/campaigns/{slug}/shots/{shot_id}/revisions"): "viewer",
    ("POST", "/api/v1/campaigns/{slug}/shots/{shot_id}/exclusion"): "ingest",
    ("DELETE", "/api/v1/campaigns/{slug}/shots/{shot_id}/exclusion"): "ingest",
    ("POST", "/api/v1/evaluate"): "viewer",
    ("POST", "/api/v1/plans/scan"): "viewer",
    ("POST", "/api/v1/plans/window"): "viewer",
    ("POST", "/api/v1/plans/nearest"): "viewer",
    ("POST", "/api/v1/plans/sensitivities"): "viewer",
    ("GET", "/api/v1/campaigns/{slug}/summary"): "viewer",
    ("GET", "/api/v1/campaigns/{slug}/calibration"): "viewer",
    ("POST", "/api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs"): "ingest",
    ("GET", "/api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs"): "viewer",
    ("GET", "/api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs/{run_id}"): "viewer",
    ("GET", "/api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs/{run_id}/figures"): "viewer",
    ("POST", "/api/v1/campaigns/{slug}/webhooks"): "admin",
    ("GET", "/api/v1/campaigns/{slug}/webhooks"): "admin",
    ("GET", "/api/v1/campaigns/{slug}/webhooks/deliveries"): "admin",
    ("DELETE", "/api/v1/campaigns/{slug}/webhooks/{webhook_id}"): "admin",
    ("GET", "/api/v1/healthz"): "public",
    ("GET", "/healthz"): "public",
    ("GET", "/api/v1/metrics"): "viewer",
    ("GET", "/metrics"): "viewer",
    # JSON feeds of the pages: 401 like the API
    ("GET", "/campaigns/{slug}/regime.json"): "viewer",
    ("GET", "/campaigns/{slug}/charts/{name}.json"): "viewer",
    ("GET", "/campaigns/{slug}/live"): "viewer",
    ("POST", "/campaigns/{slug}/plan/map"): "viewer",
    ("POST", "/campaigns/{slug}/plan/panels"): "viewer",
    ("POST", "/campaigns/{slug}/plan/point"): "viewer",
}
PAGE_ROUTES = {
    ("GET", "/"): "public",
    ("GET", "/sign-in"): "public",
    ("POST", "/sign-in"): "public",
    ("GET", "/docs"): "public",
    ("GET", "/assets/plotly.min.js"): "public",
    ("GET", "/assets/palette.css"): "public",
    ("POST", "/sign-out"): "viewer",
    ("GET", "/campaigns"): "viewer",
    ("GET", "/campaigns/{slug}"): "viewer",
    ("GET", "/campaigns/{slug}/shots"): "viewer",
    ("GET", "/campaigns/{slug}/shots.csv"): "viewer",
    ("GET", "/campaigns/{slug}/shots/{shot_id}"): "viewer",
    ("POST", "/campaigns/{slug}/shots/{shot_id}/exclude"): "ingest",
    ("POST", "/campaigns/{slug}/shots/{shot_id}/restore"): "ingest",
    ("GET", "/campaigns/{slug}/plan"): "viewer",
    ("GET", "/campaigns/{slug}/calibration"): "viewer",
    ("GET", "/campaigns/{slug}/settings"): "admin",
    ("POST", "/campaigns/{slug}/settings"): "admin",
    ("POST", "/campaigns/{slug}/settings/webhooks"): "admin",
    ("POST", "/campaigns/{slug}/settings/webhooks/{webhook_id}/delete"): "admin",
    ("GET", "/admin"): "admin",
    ("POST", "/admin/tokens"): "admin",
    ("POST", "/admin/tokens/{token_id}/revoke"): "admin",
    ("POST", "/admin/jobs/{job_id}/cancel"): "admin",
}
FILLED = {
    "{slug}": "test-campaign",
    "{shot_id}": "no-such-shot",
    "{job_id}": "00000000-0000-0000-0000-000000000000",
    "{run_id}": "1",
    "{token_id}": "1",
    "{webhook_id}": "1",
    "{name}": "timeline",
}


def _routes(routes):
    """Every APIRoute of the app, through included routers (whatever FastAPI nests them in)."""
    for route in routes:
        nested = getattr(route, "original_router", None)
        if nested is not None:
            yield from _routes(nested.routes)
        elif isinstance(route, APIRoute):
            yield route


def _url(path: str) -> str:
    for placeholder, value in FILLED.items():
        path = path.replace(placeholder, value)
    return path


def _call(client, method: str, path: str, headers: dict[str, str] | None = None):
    body = {"json": {}} if method in ("POST", "PUT", "PATCH") else {}
    return client.request(method, _url(path), headers=headers or {}, follow_redirects=False, **body)


def test_every_route_of_the_app_has_its_role_in_the_table(app):
    found = {(method, route.path) for route in _routes(app.routes) for method in route.methods}
    assert found == set(API_ROUTES) | set(PAGE_ROUTES)


@pytest.mark.parametrize(("method", "path"), sorted(k for k, v in API_ROUTES.items() if v != "public"))
def test_an_api_route_answers_401_without_a_token_and_403_below_its_role(client, campaign, request, method, path):
    needed = API_ROUTES[(method, path)]
    response = _call(client, method, path)
    assert response.status_code == 401, response.text
    assert response.headers["content-type"].startswith("application/problem+json")
    for weaker in ROLES[: ROLES.index(needed)]:
        token = request.getfixturevalue(f"{weaker}_token")
        response = _call(client, method, path, {"Authorization": f"Bearer {token}"})
        assert response.status_code == 403, (weaker, response.text)


@pytest.mark.parametrize(("method", "path"), sorted(k for k, v in PAGE_ROUTES.items() if v != "public"))
def test_a_page_sends_a_signed_out_visitor_to_sign_in_and_refuses_weaker_roles(client, campaign, request, method, path):
    needed = PAGE_ROUTES[(method, path)]
    response = _call(client, method, path)
    assert response.status_code == 303 and response.headers["location"].startswith("/sign-in"), response.text
    for weaker in ROLES[: ROLES.index(needed)]:
        sign_in(client, request.getfixturevalue(f"{weaker}_token"))
        assert _call(client, method, path).status_code == 403, weaker
        client.cookies.clear()


@pytest.mark.parametrize(
    ("method", "path"), sorted(k for k, v in {**API_ROUTES, **PAGE_ROUTES}.items() if v == "public")
)
def test_the_public_routes_answer_without_a_token(client, method, path):
    status = _call(client, method, path).status_code
    assert status < 500 and status not in (401, 403), status
