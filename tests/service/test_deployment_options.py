"""Settings the engineer who deploys wakeledger sets: /metrics for a scraper without a token (on a
path or a port of its own), JSON log lines, a path prefix."""

from __future__ import annotations

import io
import json
import logging
import re
import tomllib
import urllib.error
import urllib.request
from pathlib import Path

import pytest
from pydantic import ValidationError

from app.config import Settings


@pytest.fixture
def settings(database_url: str):
    return Settings(database_url=database_url, migrate_on_start=False, demo_mode=False, open_metrics="/metrics-open")


def test_a_scraper_reads_metrics_on_the_open_path_without_a_token_while_metrics_still_needs_one(client):
    open_answer = client.get("/metrics-open")
    assert open_answer.status_code == 200
    assert open_answer.headers["content-type"].startswith("text/plain; version=0.0.4")
    assert "# TYPE" in open_answer.text
    assert client.get("/metrics").status_code == 401
    assert "/metrics-open" not in client.get("/openapi.json").text


def test_a_scraper_reads_metrics_on_a_port_of_its_own_and_nothing_else_is_served_there():
    from app.routers.open_metrics import MetricsListener, listener_address

    assert listener_address("9108") == ("127.0.0.1", 9108)
    assert listener_address("0.0.0.0:9108") == ("0.0.0.0", 9108)
    assert listener_address("/metrics-open") is None and listener_address("") is None
    with MetricsListener("127.0.0.1", 0) as listener:
        with urllib.request.urlopen(f"http://127.0.0.1:{listener.port}/metrics", timeout=10) as answer:
            assert answer.status == 200
            assert "# TYPE" in answer.read().decode()
        with pytest.raises(urllib.error.HTTPError) as refused:
            urllib.request.urlopen(f"http://127.0.0.1:{listener.port}/api/v1/campaigns", timeout=10)
        assert refused.value.code == 404


def test_settings_refuse_an_open_metrics_value_that_is_neither_a_path_nor_a_port_and_a_prefix_without_slash():
    with pytest.raises(ValidationError, match="open_metrics"):
        Settings(open_metrics="metrics")
    with pytest.raises(ValidationError, match="root_path"):
        Settings(root_path="wakeledger")
    assert Settings(root_path="/wakeledger/").root_path == "/wakeledger"


def test_json_logs_are_one_object_a_line_with_the_request_fields_for_an_access_line():
    from app.logs import JsonLineFormatter

    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonLineFormatter())
    record = logging.getLogger("uvicorn.access").makeRecord(  # a record as uvicorn writes it
        "uvicorn.access",
        logging.INFO,
        __file__,
        1,
        '%s - "%s %s HTTP/%s" %d',
        ("127.0.0.1:5000", "POST", "/api/v1/campaigns/x/shots", "1.1", 201),
        None,
    )
    handler.emit(record)
    line = json.loads(stream.getvalue())
    assert line["level"] == "info" and line["logger"] == "uvicorn.access"
    assert line["message"] == '127.0.0.1:5000 - "POST /api/v1/campaigns/x/shots HTTP/1.1" 201'
    assert (line["method"], line["path"], line["status"], line["client"]) == (
        "POST",
        "/api/v1/campaigns/x/shots",
        201,
        "127.0.0.1:5000",
    )
    assert line["time"].endswith("Z")


def test_the_log_configuration_for_the_server_takes_json_or_text():
    from app.logs import uvicorn_log_config

    assert uvicorn_log_config("json")["formatters"]["line"] == {"()": "app.logs.JsonLineFormatter"}
    assert "format" in uvicorn_log_config("text")["formatters"]["line"]
    with pytest.raises(ValidationError, match="log_format"):
        Settings(log_format="xml")


# --- the deployment files, kept correct by reading them (no container engine in the test run) ----

REPO = Path(__file__).resolve().parents[2]


def _canonical(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def test_the_image_pins_every_runtime_dependency_through_the_constraints_file():
    project = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    pins = dict(
        line.split("==", 1)
        for line in (REPO / "constraints.txt").read_text(encoding="utf-8").splitlines()
        if line and not line.startswith("#")
    )
    wanted = {_canonical(re.match(r"[A-Za-z0-9._-]+", d).group(0)) for d in project["dependencies"]}
    assert sorted(wanted - set(pins)) == [], "run scripts/freeze_constraints.py"
    dockerfile = (REPO / "Dockerfile").read_text(encoding="utf-8")
    assert re.search(r"^FROM python:3\.\d+-slim$", dockerfile, re.M)
    assert "pip install --requirement constraints.txt" in dockerfile
    assert "--no-deps" in dockerfile  # wakeledger itself adds nothing unpinned
    assert re.search(r"^USER wakeledger$", dockerfile, re.M)


def test_the_image_copies_every_package_the_project_installs():
    found = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]["packages"]
    dockerfile = (REPO / "Dockerfile").read_text(encoding="utf-8")
    for pattern in found["find"]["include"]:
        package = pattern.rstrip("*")
        assert f"COPY {package} ./{package}" in dockerfile, package


def test_compose_builds_the_image_and_reads_the_password_from_the_env_file():
    compose = (REPO / "docker-compose.yml").read_text(encoding="utf-8")
    app = compose.split("\n  app:\n", 1)[1]
    assert "    build: .\n" in app and "    env_file: .env\n" in app
    assert "pip install" not in compose
    assert "PGPASSWORD: ${POSTGRES_PASSWORD:?" in app
    assert "POSTGRES_PASSWORD:" not in compose.split("\n  app:\n", 1)[0]  # the db takes it from .env
    example = (REPO / ".env.example").read_text(encoding="utf-8")
    assert re.search(r"^POSTGRES_PASSWORD=$", example, re.M)
    assert ".env" in (REPO / ".gitignore").read_text(encoding="utf-8").split()
