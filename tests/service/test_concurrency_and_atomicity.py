"""Two DAQ posters at once, crashes mid-write, and the ingest service called directly."""

from __future__ import annotations

import threading

import httpx
import pytest
from sqlalchemy import func, select

from app.services.ingest import ingest_shots
from app.store import shots as shot_store
from app.tables import AuditEntry, Evaluation, Flag, Shot, ShotRevision


def _counts(app) -> dict[str, int]:
    with app.state.session_factory() as session:
        return {
            t.__tablename__: session.scalar(select(func.count()).select_from(t))
            for t in (Shot, ShotRevision, Evaluation, Flag)
        }


def _shots(make_shot, ids) -> list[dict]:
    return [
        make_shot(i % 3, shot_id=f"c-{i:05d}", taken_at=f"2026-11-17T11:{i // 60 % 60:02d}:{i % 60:02d}Z") for i in ids
    ]


def test_two_posters_of_overlapping_batches_both_succeed_and_every_shot_is_stored_once(
    app, live_server, campaign, ingest_token, make_shot
):
    batches = {
        "a": [_shots(make_shot, range(start, start + 100)) for start in range(0, 300, 100)],
        "b": [_shots(make_shot, range(start, start + 100)) for start in range(150, 450, 100)],
    }
    statuses: dict[str, list[int]] = {"a": [], "b": []}

    def poster(name: str) -> None:
        with httpx.Client(
            base_url=live_server, headers={"Authorization": f"Bearer {ingest_token}"}, timeout=60
        ) as http:
            for batch in batches[name]:
                statuses[name].append(
                    http.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": batch}).status_code
                )

    threads = [threading.Thread(target=poster, args=(n,)) for n in batches]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert all(s in (200, 201) for s in statuses["a"] + statuses["b"]), statuses
    assert len(statuses["a"]) == len(statuses["b"]) == 3
    counts = _counts(app)
    assert counts["shots"] == counts["shot_revisions"] == counts["evaluations"] == 450
    with app.state.session_factory() as session:
        ids = list(session.scalars(select(Shot.shot_id)))
    assert sorted(ids) == [f"c-{i:05d}" for i in range(450)]


def test_four_posters_of_the_same_single_shots_store_each_once_without_errors(
    app, live_server, campaign, ingest_token, make_shot
):
    shots = _shots(make_shot, range(15))
    codes: list[int] = []
    lock = threading.Lock()

    def poster() -> None:
        with httpx.Client(
            base_url=live_server, headers={"Authorization": f"Bearer {ingest_token}"}, timeout=60
        ) as http:
            for shot in shots:
                code = http.post(f"/api/v1/campaigns/{campaign}/shots", json=shot).status_code
                with lock:
                    codes.append(code)

    threads = [threading.Thread(target=poster) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert len(codes) == 60
    assert codes.count(201) == 15
    assert codes.count(200) == 45
    assert _counts(app)["shots"] == 15


def test_the_demo_generator_can_ingest_through_the_same_service_the_api_uses(app, campaign, make_shot):
    with app.state.session_factory() as session:
        result = ingest_shots(session, campaign, _shots(make_shot, range(12)), actor="demo")
    assert result.count("created") == 12
    assert [i.status for i in result.items[:3]] == ["nominal", "outside", "outside"]
    with app.state.session_factory() as session:
        again = ingest_shots(session, campaign, _shots(make_shot, range(12)), actor="demo")
    assert again.count("unchanged") == 12
    assert _counts(app)["shots"] == 12


def test_a_crash_in_the_middle_of_a_batch_leaves_no_partial_rows(app, campaign, make_shot, monkeypatch):
    def broken(*_args, **_kwargs):
        raise RuntimeError("disk unplugged")

    monkeypatch.setattr(shot_store, "insert_flags", broken)
    with app.state.session_factory() as session, pytest.raises(RuntimeError):
        ingest_shots(session, campaign, _shots(make_shot, range(20)), actor="test")
    assert _counts(app) == {"shots": 0, "shot_revisions": 0, "evaluations": 0, "flags": 0}
    with app.state.session_factory() as session:
        assert (
            session.scalar(select(func.count()).select_from(AuditEntry).where(AuditEntry.action == "shots.ingest")) == 0
        )


def test_an_unexpected_server_error_answers_a_500_problem_and_stores_nothing(
    app, campaign, ingest_headers, make_shot, monkeypatch
):
    from starlette.testclient import TestClient

    monkeypatch.setattr(shot_store, "insert_evaluations", lambda *a, **k: 1 / 0)
    with TestClient(app, raise_server_exceptions=False) as client:
        response = client.post(f"/api/v1/campaigns/{campaign}/shots", json=make_shot(), headers=ingest_headers)
    assert response.status_code == 500
    assert response.headers["content-type"].startswith("application/problem+json")
    assert "ZeroDivision" not in response.text
    assert _counts(app)["shots"] == 0
