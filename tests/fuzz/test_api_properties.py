"""A bounded property-based run of the API from its own OpenAPI schema (schemathesis on
hypothesis): for every operation, a fixed-seed set of generated requests, each of which
must answer without a 5xx, with a documented status code, content type and body schema.

Bounded: ``EXAMPLES`` per operation (50; every operation gets its share), no shrinking, a
fixed seed (``derandomize``), so a run costs the same every time and a failure is found again
by the next run (under a minute of CPU). A deep run raises the budget per operation, e.g.
``WAKELEDGER_FUZZ_EXAMPLES=1000 .venv/bin/python -m pytest -q tests/fuzz`` (about twenty
times as long); worth it after a change to a route's schema or parsing.
"""

from __future__ import annotations

import os

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given, settings
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)

EXAMPLES = int(os.environ.get("WAKELEDGER_FUZZ_EXAMPLES", "50"))
CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]


@pytest.fixture
def fuzz_app(settings):
    """The app without rate limits (the run posts thousands of requests with one token)."""
    from app.main import create_app

    app = create_app(settings.model_copy(update={"rate_limit_writes": "", "rate_limit_expensive_reads": ""}))
    yield app
    app.state.engine.dispose()


@pytest.fixture
def fuzz_headers(fuzz_app, make_shot):
    """An admin token, and a campaign with a stored shot for the generated requests to find."""
    from starlette.testclient import TestClient

    from app.services.auth import create_token

    with fuzz_app.state.session_factory() as session:
        token = create_token(session, "admin", "fuzz-admin", actor="tests")
    headers = {"Authorization": f"Bearer {token}"}
    with TestClient(fuzz_app) as client:
        client.post("/api/v1/campaigns", json={"slug": "a", "name": "Fuzzed"}, headers=headers)
        client.post("/api/v1/campaigns/a/shots", json=make_shot(shot_id="0"), headers=headers)
    return headers


def _operations() -> list[tuple[str, str]]:
    """(method, path) of every operation in the schema (read from an app that serves nothing)."""
    from app.config import Settings
    from app.main import create_app

    paths = create_app(Settings(database_url="sqlite://", migrate_on_start=False)).openapi()["paths"]
    return sorted((method.upper(), path) for path, ops in paths.items() for method in ops)


@pytest.mark.parametrize(("method", "path"), _operations())
def test_no_generated_request_gets_a_server_error_or_an_answer_outside_the_schema(fuzz_app, fuzz_headers, method, path):
    operation = schemathesis.openapi.from_asgi("/openapi.json", fuzz_app)[path][method]

    @given(case=operation.as_strategy())
    @settings(
        max_examples=EXAMPLES,
        derandomize=True,
        deadline=None,
        phases=[Phase.generate],
        suppress_health_check=list(HealthCheck),
        database=None,
    )
    def every_case(case) -> None:
        case.call_and_validate(headers=fuzz_headers, checks=CHECKS)

    every_case()
