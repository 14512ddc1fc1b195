"""Loading the demo campaign through the services, and the ``wakeledger demo`` command."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
import urllib.request
from collections import Counter
from pathlib import Path

import pytest
from sqlalchemy import func, select

import model
from app.config import Settings
from app.database import make_engine, make_session_factory
from app.services.auth import resolve_token
from app.tables import Campaign, Evaluation, Flag, Shot
from seed_demo import scenario
from seed_demo.generator import generate_demo_shots
from seed_demo.loader import load_demo_campaign, prepare_demo

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def demo_payloads() -> list[dict]:
    return generate_demo_shots()


def test_demo_loads_through_the_services_and_a_second_load_changes_nothing(database_url, demo_payloads):
    engine = make_engine(database_url)
    factory = make_session_factory(engine)
    try:
        first = load_demo_campaign(factory, batch_size=700)
        assert first.campaign_created and not first.skipped
        assert first.shots_created == first.shots_in_campaign == len(demo_payloads)

        with factory() as session:
            campaign = session.scalar(select(Campaign).where(Campaign.slug == scenario.CAMPAIGN_SLUG))
            assert campaign is not None
            assert campaign.timezone == scenario.CAMPAIGN_TIMEZONE
            assert session.scalar(select(func.count()).select_from(Shot)) == len(demo_payloads)
            assert session.scalar(select(func.count()).select_from(Evaluation)) == len(demo_payloads)
            statuses = Counter(
                dict(session.execute(select(Evaluation.status, func.count()).group_by(Evaluation.status)).all())
            )
            assert statuses["nominal"] > statuses["marginal"] > 0 and statuses["outside"] > 0
            codes = set(session.scalars(select(Flag.code).distinct()))
            assert codes == set(model.FLAG_CODES)
            stored = session.scalar(select(Shot).where(Shot.shot_id == demo_payloads[0]["shot_id"]))
            assert stored.raw_payload["daq"] == demo_payloads[0]["daq"]  # unknown field kept verbatim
            markup = next(p for p in demo_payloads if "<b>" in p["notes"])
            assert session.scalar(select(Shot.notes).where(Shot.shot_id == markup["shot_id"])) == markup["notes"]

        again = load_demo_campaign(factory)
        assert again.skipped and not again.campaign_created and again.shots_created == 0
        assert again.shots_in_campaign == len(demo_payloads)
    finally:
        engine.dispose()


def test_an_interrupted_demo_load_resumes_where_it_stopped(database_url, demo_payloads):
    from app.schemas import CampaignCreate
    from app.services.campaigns import create_campaign
    from app.services.ingest import ingest_shots
    from seed_demo.generator import demo_campaign_spec

    engine = make_engine(database_url)
    factory = make_session_factory(engine)
    try:
        # A load that stopped after its first two batches.
        with factory() as session:
            create_campaign(session, CampaignCreate(**demo_campaign_spec()), "tests")
            ingest_shots(session, scenario.CAMPAIGN_SLUG, demo_payloads[:1000], "tests")
        resumed = load_demo_campaign(factory)
        assert not resumed.skipped and not resumed.campaign_created
        assert resumed.shots_created == len(demo_payloads) - 1000
        assert resumed.shots_unchanged == 1000
        assert resumed.shots_in_campaign == len(demo_payloads)
    finally:
        engine.dispose()


def test_prepared_demo_lets_visitors_read_without_signing_in_and_gives_an_admin_token(tmp_path):
    from starlette.testclient import TestClient

    prepared = prepare_demo(tmp_path / "demo.db", Settings(database_url="sqlite:///unused.db"))
    try:
        assert prepared.database_url == f"sqlite:///{(tmp_path / 'demo.db').resolve()}"
        assert prepared.app.state.settings.demo_mode
        with prepared.app.state.session_factory() as session:
            info = resolve_token(session, prepared.admin_token)
        assert info is not None and info.role == "admin"
        with TestClient(prepared.app) as client:
            response = client.get("/api/v1/campaigns")
            assert response.status_code == 200, response.text
            assert scenario.CAMPAIGN_SLUG in response.text
            refused = client.post("/api/v1/campaigns", json={"slug": "x", "name": "x"})
            assert refused.status_code == 401
            # the demo's shots carry daq.run: the calibration shows its scale per run from the first start
            calibration = client.get(f"/api/v1/campaigns/{scenario.CAMPAIGN_SLUG}/calibration").json()
            assert calibration["run_series_by"] == ["daq.run"] and len(calibration["run_series"]) > 20
            assert calibration["run_untagged_shots"] == 0
            page = client.get(f"/campaigns/{scenario.CAMPAIGN_SLUG}/calibration")
            assert page.status_code == 200 and "per run, by daq.run (95 % interval)" in page.text
    finally:
        prepared.app.state.engine.dispose()

    second = prepare_demo(tmp_path / "demo.db", Settings())
    try:
        assert second.load.skipped
        assert second.admin_token != prepared.admin_token
    finally:
        second.app.state.engine.dispose()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_wakeledger_demo_starts_prints_the_url_and_token_and_serves_anonymous_readers(tmp_path):
    port = _free_port()
    env = {**os.environ, "PYTHONPATH": str(REPO), "DATABASE_URL": "sqlite:///must-not-be-used.db"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "app.cli", "demo", "--port", str(port), "--db", str(tmp_path / "demo.db")],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        lines: list[str] = []
        deadline = time.monotonic() + 60
        assert proc.stdout is not None
        while time.monotonic() < deadline:  # bounded: the demo must be up within 60 s
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line)
            if line.startswith("admin token:"):
                break
        output = "".join(lines)
        assert f"http://127.0.0.1:{port}/campaigns/{scenario.CAMPAIGN_SLUG}" in output, output
        token = lines[-1].split(":", 1)[1].strip()
        assert token

        body = None
        while time.monotonic() < deadline:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/v1/campaigns", timeout=2) as r:
                    body = json.loads(r.read())
                break
            except OSError:
                time.sleep(0.1)
        assert body is not None, "the demo server did not answer"
        assert scenario.CAMPAIGN_SLUG in json.dumps(body)
        assert (tmp_path / "demo.db").exists() and not (tmp_path / "must-not-be-used.db").exists()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


def test_a_second_demo_start_keeps_the_admin_token_of_the_demo_already_running(tmp_path):
    from app.tables import ApiToken, AuditEntry
    from seed_demo.loader import DEMO_TOKEN_LIFETIME

    first = prepare_demo(tmp_path / "demo.db", Settings())
    first.app.state.engine.dispose()
    second = prepare_demo(tmp_path / "demo.db", Settings())
    try:
        with second.app.state.session_factory() as session:
            for printed in (first.admin_token, second.admin_token):
                info = resolve_token(session, printed)
                assert info is not None and info.role == "admin"
            demo_tokens = session.scalars(select(ApiToken).where(ApiToken.name == "demo-admin")).all()
            assert len(demo_tokens) == 2 and all(t.revoked_at is None for t in demo_tokens)
            assert all(t.expires_at - t.created_at == DEMO_TOKEN_LIFETIME for t in demo_tokens)
            assert session.scalars(select(AuditEntry).where(AuditEntry.action == "token.revoke")).all() == []
    finally:
        second.app.state.engine.dispose()
