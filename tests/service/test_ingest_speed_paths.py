"""What the faster ingest keeps: one JSON text per payload (digest and both stored copies),
shots stored under the earlier digest still replay as unchanged, NaN still refused, inputs
validated once, and SQLite writers of one process queue in the order they came."""

from __future__ import annotations

import hashlib
import json
import os
import threading

import pytest
from sqlalchemy import select, text, update
from sqlalchemy.orm import Session

import model
from app.database import (
    SQLITE_AUTOCHECKPOINT_PAGES,
    FifoLock,
    begin_write,
    checkpoint_wal,
    defer_wal_checkpoint,
    json_dumps,
    writer_queue,
)
from app.errors import InvalidInput
from app.services.ingest import payloads as payload_rules
from app.services.ingest.payloads import canonical_json, legacy_payload_digest, prepare_all, stored_comparable
from app.tables import Shot, ShotRevision


def _shots_url(campaign: str) -> str:
    return f"/api/v1/campaigns/{campaign}/shots"


def _stored_text(app, table, column: str = "raw_payload") -> list[str]:
    with app.state.session_factory() as session:
        if session.get_bind().dialect.name == "postgresql":
            return list(session.scalars(text(f"SELECT {column}::text FROM {table} ORDER BY id")))
        return list(session.scalars(text(f"SELECT {column} FROM {table} ORDER BY id")))


def test_a_posted_shot_is_stored_as_one_sorted_json_text_whose_sha256_is_its_digest(
    client, app, campaign, ingest_headers, make_shot
):
    shot = make_shot(changes={"plasma.density_cm3": 1.0e16})
    shot["daq"] = {"sequence": 7, "crate": 3}
    assert client.post(_shots_url(campaign), json=shot, headers=ingest_headers).status_code == 201
    [stored], [revision] = _stored_text(app, "shots"), _stored_text(app, "shot_revisions")
    assert json.loads(stored) == shot == json.loads(revision)
    assert stored == canonical_json(shot) and list(json.loads(stored)) == sorted(shot)
    with app.state.session_factory() as session:
        digest = session.scalar(select(Shot.payload_sha256))
    assert digest == hashlib.sha256(canonical_json(stored_comparable(shot)).encode()).hexdigest()


def test_a_shot_stored_under_the_earlier_digest_is_unchanged_when_posted_again(
    client, app, campaign, ingest_headers, viewer_headers, make_shot
):
    # 1.5e-7 is written 1.5e-07 by the standard encoder and 1.5e-7 by orjson: the two digests differ.
    shot = make_shot()
    shot["daq"] = {"trigger_delay_s": 1.5e-7}
    assert client.post(_shots_url(campaign), json=shot, headers=ingest_headers).status_code == 201
    earlier = legacy_payload_digest(stored_comparable(shot))
    with app.state.session_factory() as session, session.begin():
        assert session.scalar(select(Shot.payload_sha256)) != earlier
        session.execute(update(Shot).values(payload_sha256=earlier))
        session.execute(update(ShotRevision).values(payload_sha256=earlier))
    again = client.post(_shots_url(campaign), json=shot, headers=ingest_headers)
    assert again.status_code == 200, again.text
    batch = client.post(f"{_shots_url(campaign)}/batch", json={"shots": [shot]}, headers=ingest_headers)
    assert [i["outcome"] for i in batch.json()["items"]] == ["unchanged"]
    put = client.put(f"{_shots_url(campaign)}/{shot['shot_id']}", json=shot, headers=ingest_headers)
    assert put.status_code == 200 and put.json()["revision"] == 1
    changed = dict(shot, notes="a different note")
    conflict = client.post(_shots_url(campaign), json=changed, headers=ingest_headers)
    assert conflict.status_code == 409 and [e["field"] for e in conflict.json()["errors"]] == ["notes"]


def test_nan_in_another_section_is_still_refused_naming_its_path(make_shot):
    shot = make_shot()
    shot["daq"] = {"gain": float("nan"), "note": "null"}
    with pytest.raises(InvalidInput) as caught:
        prepare_all([shot], batch=False)
    assert [p[0] for p in caught.value.problems] == ["daq.gain"]
    shot["daq"] = {"gain": None, "note": "null"}  # a null alone is fine
    assert prepare_all([shot], batch=False).shots[0].text == canonical_json(shot)


def test_the_inputs_of_a_batch_are_validated_once(make_shot, monkeypatch):
    shots = [make_shot(shot_id=f"v-{i}") for i in range(3)]
    prepared = prepare_all(shots, batch=True)
    calls = []
    real = model.validate_columns
    monkeypatch.setattr(model, "validate_columns", lambda *a, **k: calls.append(1) or real(*a, **k))
    some = prepared.inputs_of(prepared.shots[1:])
    assert isinstance(some, model.ValidatedColumns) and some.rows == 2
    model.evaluate_table(some)
    assert calls == [] and prepared.inputs_of(prepared.shots) is prepared.inputs
    assert payload_rules.defaulted_by_shot(shots) == [payload_rules.defaulted_fields(s) for s in shots]


def test_every_flag_of_a_batch_is_stored_as_the_shot_evaluated_alone_reports_it(
    client, app, campaign, ingest_headers, make_shot
):
    shots = [
        make_shot(case=i % 5, shot_id=f"f-{i}", changes={"plasma.density_cm3": 10 ** (13 + i / 3)}) for i in range(12)
    ]
    posted = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert posted.status_code == 201
    with app.state.session_factory() as session:
        rows = session.execute(
            text(
                "SELECT s.shot_id, f.code, f.severity, f.value, f.limit_value, f.message "
                "FROM flags f JOIN shots s ON s.id = f.shot_pk ORDER BY f.id"
            )
        ).all()
    stored = {shot["shot_id"]: [tuple(r[1:]) for r in rows if r[0] == shot["shot_id"]] for shot in shots}
    expected = {
        shot["shot_id"]: [
            (f["code"], f["severity"], f["value"], f["limit"], f["message"]) for f in model.evaluate_shot(shot)["flags"]
        ]
        for shot in shots
    }
    assert stored == expected and sum(map(len, stored.values())) > len(shots)


def test_a_batch_of_hundreds_stores_every_shot_revision_evaluation_and_flag_once(
    client, app, campaign, ingest_headers, make_shot
):
    # 230 shots: two full multi-row statements of each table on SQLite and the rows after them
    shots = [
        make_shot(
            case=i % 5,
            shot_id=f"h-{i:03d}",
            taken_at=f"2026-11-17T10:{i // 60:02d}:{i % 60:02d}.{i:03d}Z",
            changes={"plasma.density_cm3": 10 ** (13 + (i % 17) / 4)},
        )
        for i in range(230)
    ]
    posted = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert posted.status_code == 201 and posted.json()["created"] == 230
    with app.state.session_factory() as session:
        stored = session.execute(
            text(
                "SELECT s.shot_id, s.plasma_density_cm3, e.status, r.revision, "
                "(SELECT count(*) FROM flags f WHERE f.shot_pk = s.id) "
                "FROM shots s JOIN evaluations e ON e.shot_pk = s.id JOIN shot_revisions r ON r.shot_pk = s.id "
                "ORDER BY s.shot_id"
            )
        ).all()
        counts = [session.scalar(text(f"SELECT count(*) FROM {t}")) for t in ("shots", "shot_revisions", "evaluations")]
        flag_rows = session.scalar(text("SELECT count(*) FROM flags"))
    expected = []
    for shot in shots:
        evaluated = model.evaluate_shot(shot)
        expected.append(
            (shot["shot_id"], shot["plasma"]["density_cm3"], evaluated["status"], 1, len(evaluated["flags"]))
        )
    assert [tuple(r) for r in stored] == expected
    assert counts == [230, 230, 230] and flag_rows == sum(e[4] for e in expected) > 230


def test_tags_and_defaulted_fields_repeated_across_a_batch_are_stored_as_each_shot_has_them(
    client, app, campaign, ingest_headers, make_shot
):
    tags = [["scan"], ["scan", "density"], [], ["scan"], ["density", "scan"], ["é", "night shift"], []]
    shots = [make_shot(shot_id=f"t-{i}", drop=["driver.offset_x_mm"] if i % 2 else ()) for i in range(len(tags))]
    for shot, shot_tags in zip(shots, tags, strict=True):
        shot["tags"] = shot_tags
    posted = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert posted.status_code == 201
    stored_tags = _stored_text(app, "shots", "tags")
    assert [json.loads(t) for t in stored_tags] == tags
    assert stored_tags == [json_dumps(t) for t in tags]
    with app.state.session_factory() as session:
        defaulted = session.scalars(text("SELECT e.defaulted_fields FROM evaluations e ORDER BY e.shot_pk")).all()
    defaulted = [json.loads(d) if isinstance(d, str) else d for d in defaulted]
    assert defaulted == [payload_rules.defaulted_fields(s) for s in shots]
    assert defaulted[0] != defaulted[1]


def test_a_batch_posted_again_is_unchanged_shot_for_shot_past_a_thousand_ids(
    client, app, campaign, ingest_headers, make_shot
):
    # the stored digests of every id are read in one statement, the ids one parameter
    shots = [make_shot(case=i % 5, shot_id=f"r-{i:04d}") for i in range(1100)]
    url = f"{_shots_url(campaign)}/batch"
    assert client.post(url, json={"shots": shots}, headers=ingest_headers).json()["created"] == 1100
    changed = [*shots[:700], {**shots[700], "notes": "changed"}, *shots[701:]]
    conflict = client.post(url, json={"shots": changed}, headers=ingest_headers)
    assert conflict.status_code == 409 and [e["field"] for e in conflict.json()["errors"]] == ["shots.700.notes"]
    again = client.post(url, json={"shots": shots}, headers=ingest_headers)
    assert again.status_code == 200 and again.json()["unchanged"] == 1100


def test_a_time_written_by_a_bulk_insert_on_sqlite_is_the_text_sqlalchemy_writes():
    from datetime import UTC, datetime, timedelta, timezone

    from sqlalchemy.dialects import sqlite

    from app.tables import UTCDateTime

    dialect = sqlite.dialect()
    column = UTCDateTime()
    process = column.dialect_impl(dialect).bind_processor(dialect)
    moments = [
        datetime(2026, 11, 17, 9, 12, 3, 120000, tzinfo=UTC),
        datetime(2026, 11, 17, 9, 12, 3, tzinfo=timezone(timedelta(hours=5, minutes=30))),
        datetime(1990, 1, 1, 0, 0, 0, 1, tzinfo=UTC),
        datetime(9999, 12, 31, 23, 59, 59, 999999, tzinfo=UTC),
        datetime(1, 1, 1, 12, tzinfo=timezone(timedelta(hours=-3))),
        None,
    ]
    assert [UTCDateTime.sqlite_text(m) for m in moments] == [process(m) for m in moments]
    with pytest.raises(ValueError):
        UTCDateTime.sqlite_text(datetime(2026, 11, 17))


# --- the WAL checkpoint after the answer (SQLite) --------------------------------------------------


def _file_holds_every_page(engine) -> bool:
    """Whether the database file itself holds all pages (nothing waits in the WAL to be copied)."""
    path = engine.url.database
    with engine.connect() as conn:
        pages = conn.exec_driver_sql("PRAGMA page_count").scalar() * conn.exec_driver_sql("PRAGMA page_size").scalar()
    return os.path.getsize(path) >= pages


@pytest.mark.parametrize("backend", ["sqlite"], indirect=True)
def test_a_batch_is_answered_and_its_pages_then_reach_the_database_file(
    client, app, campaign, ingest_headers, make_shot
):
    shots = [make_shot(case=i % 5, shot_id=f"w-{i}") for i in range(300)]
    posted = client.post(f"{_shots_url(campaign)}/batch", json={"shots": shots}, headers=ingest_headers)
    assert posted.status_code == 201
    # 300 shots are fewer WAL pages than SQLite's own checkpoint waits for: the file has them all
    # because the checkpoint ran after the answer
    assert _file_holds_every_page(app.state.engine)


@pytest.mark.parametrize("backend", ["sqlite"], indirect=True)
def test_a_commit_that_defers_the_checkpoint_leaves_the_wal_and_the_connection_gets_it_back(app):
    engine = app.state.engine
    with engine.connect() as conn:
        with Session(bind=conn) as session:
            begin_write(session)
            session.execute(text("CREATE TABLE scratch_pages (b BLOB)"))
            defer_wal_checkpoint(session)
            # 6 MB: past the 1,000 pages at which a commit would copy the WAL into the file
            session.execute(text("INSERT INTO scratch_pages VALUES (:b)"), [{"b": bytes(4000)}] * 1500)
            session.commit()
        assert not _file_holds_every_page(engine)
        dbapi = conn.connection.dbapi_connection
        assert dbapi.execute("PRAGMA wal_autocheckpoint").fetchone()[0] == 0
        with conn.begin():  # the next transaction on that connection checkpoints as SQLite does
            assert conn.exec_driver_sql("PRAGMA wal_autocheckpoint").scalar() == SQLITE_AUTOCHECKPOINT_PAGES
    checkpoint_wal(engine)
    assert _file_holds_every_page(engine)


# --- the writer queue ---------------------------------------------------------------------------------


def test_writers_waiting_for_the_lock_get_it_in_the_order_they_came():
    lock = FifoLock()
    assert lock.acquire(timeout=5)
    order: list[int] = []
    threads = []
    for k in range(6):
        thread = threading.Thread(target=lambda k=k: (lock.acquire(timeout=30), order.append(k), lock.release()))
        thread.start()
        threads.append(thread)
        while len(lock._waiters) < k + 1:  # wait until it stands in line
            threading.Event().wait(0.001)
    lock.release()
    for thread in threads:
        thread.join(timeout=30)
    assert order == list(range(6))
    assert lock.acquire(timeout=1)  # free again
    lock.release()


@pytest.mark.parametrize("backend", ["sqlite"], indirect=True)
def test_a_sqlite_writer_holds_its_turn_until_commit_and_the_next_one_waits(app):
    factory = app.state.session_factory
    queue = writer_queue(factory.kw["bind"])
    first = factory()
    begin_write(first)
    got_turn = threading.Event()

    def second() -> None:
        with factory() as session:
            begin_write(session)
            got_turn.set()
            session.rollback()

    thread = threading.Thread(target=second)
    thread.start()
    while len(queue._waiters) < 1:  # the second writer waits in line
        threading.Event().wait(0.001)
    assert not got_turn.is_set()
    first.commit()
    first.close()
    thread.join(timeout=30)
    assert got_turn.is_set() and not queue._waiters
    with factory() as session:  # and the turn was handed back
        begin_write(session)
        session.rollback()
    assert queue.acquire(timeout=1)
    queue.release()
