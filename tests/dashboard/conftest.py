"""Page-test fixtures: a campaign seeded through the API and a signed-in browser-like client."""

from __future__ import annotations

from typing import Any

import pytest

from tests.support.page_shots import page_shots as make_page_shots
from tests.support.sessions import sign_in


@pytest.fixture
def page_shots(make_shot) -> list[dict[str, Any]]:
    return make_page_shots(make_shot)


@pytest.fixture
def seeded(client, campaign, admin_headers, page_shots) -> str:
    """The test campaign with 36 shots: 27 nominal, 3 marginal, 6 outside."""
    response = client.post(
        f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": page_shots}, headers=admin_headers
    )
    assert response.status_code == 201, response.text
    return campaign


@pytest.fixture
def viewer_client(client, viewer_token):
    """The test client signed in as a viewer (``client.csrf_token``: its session's CSRF token)."""
    client.csrf_token = sign_in(client, viewer_token)
    return client


@pytest.fixture
def admin_client(client, admin_token):
    """The test client signed in as an admin (``client.csrf_token``: its session's CSRF token)."""
    client.csrf_token = sign_in(client, admin_token)
    return client


@pytest.fixture
def db(app):
    with app.state.session_factory() as session:
        yield session
