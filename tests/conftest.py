"""Shared fixtures for every test package (owned by the service engineer).

Databases
- ``backend``: "sqlite" or "postgresql". Every test that uses a database fixture runs
  once per backend. PostgreSQL runs only when WAKELEDGER_TEST_POSTGRES_URL names a server
  (e.g. postgresql+psycopg://postgres@127.0.0.1:5432/postgres); otherwise those cases are
  skipped with the reason (they fail instead when WAKELEDGER_REQUIRE_POSTGRES is set, as
  .ci/run does). WAKELEDGER_TEST_BACKENDS=sqlite (comma list) restricts the set.
  Select one with ``-k sqlite`` / ``-k postgresql``.
- ``database_url``: a migrated database with no rows, fresh for each test. SQLite: a copy
  of a migrated template file, in /dev/shm where it exists (no fsync cost), removed after
  the test. PostgreSQL: one scratch database per test session (CREATE DATABASE
  wl_test_<random>, synchronous_commit off, dropped at the end), emptied before each test
  over one connection kept for the session.
- ``empty_database_url``: a database with no tables at all (for migration tests).

App
- ``settings``: app.config.Settings for ``database_url`` (demo mode off, no migration at start;
  no overview warm-up at start, as for every app and server the tests start).
- ``app``: ``create_app(settings)``; ``client``: a starlette TestClient (lifespan run).
- ``live_server``: base URL ("http://127.0.0.1:<port>") of a real uvicorn serving ``app``
  on a free loopback port, stopped after the test.
- ``job_worker``: ``start(**settings) -> Popen`` starts a ``wakeledger worker`` process on
  ``database_url`` (settings as WAKELEDGER_* environment, e.g. ``job_lease_seconds=2``);
  every process it started is killed and reaped after the test. In-process tests run
  the queue with ``tests.support.jobs.run_queued_jobs`` instead.
- ``admin_token``, ``ingest_token``, ``viewer_token``: raw tokens of each role;
  ``admin_headers``, ``ingest_headers``, ``viewer_headers``: {"Authorization": "Bearer ..."}.
- ``campaign``: slug of a campaign created through the API ("test-campaign", default settings).

Shots
- ``reference_cases``: the worked examples, read from tests/data/reference_cases.json (the specification's copy).
- ``make_shot(case=0, shot_id=None, taken_at=None, changes=None, drop=())``: a valid shot
  body built from worked example ``case`` (index or its shot_id, e.g. "ex-2"), with a
  taken_at; ``changes`` maps dotted paths to new values ({"plasma.density_cm3": -1}),
  ``drop`` lists dotted paths to remove.
"""

from __future__ import annotations

import contextlib
import copy
import json
import os
import shutil
import socket
import sqlite3
import tempfile
import threading
import time
import uuid
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

REPO = Path(__file__).resolve().parents[1]
REFERENCE_CASES_PATH = REPO / "tests" / "data" / "reference_cases.json"
PG_ENV = "WAKELEDGER_TEST_POSTGRES_URL"
BACKENDS_ENV = "WAKELEDGER_TEST_BACKENDS"
REQUIRE_PG_ENV = "WAKELEDGER_REQUIRE_POSTGRES"
PG_SKIP_REASON = f"PostgreSQL tests need {PG_ENV} (e.g. postgresql+psycopg://postgres@127.0.0.1:5432/postgres)"
# No start-up warm-up of overviews in apps and servers the tests start (they inherit the
# environment): a test reads what it asks for, when it asks; tests/dashboard turns it on.
os.environ.setdefault("WAKELEDGER_WARM_OVERVIEW_CAMPAIGNS", "0")


def _skip_postgres() -> None:
    """Skip, or fail when CI demands PostgreSQL (WAKELEDGER_REQUIRE_POSTGRES=1)."""
    if os.environ.get(REQUIRE_PG_ENV):
        pytest.fail(f"{PG_SKIP_REASON}; {REQUIRE_PG_ENV} is set")
    pytest.skip(PG_SKIP_REASON)


def _wanted_backends() -> list[str]:
    raw = os.environ.get(BACKENDS_ENV, "sqlite,postgresql")
    return [b.strip() for b in raw.split(",") if b.strip()]


def _backend_params() -> list[Any]:
    return [
        pytest.param(b, marks=[pytest.mark.postgres] if b == "postgresql" else [], id=b)
        for b in ("sqlite", "postgresql")
        if b in _wanted_backends()
    ]


# --- PostgreSQL scratch databases -------------------------------------------------------------


def _pg_admin_url() -> str | None:
    url = os.environ.get(PG_ENV)
    if not url:
        return None
    from app.database import normalise_url

    return normalise_url(url)


def _create_pg_database(admin_url: str, suffix: str = "") -> str:
    name = f"wl_test_{uuid.uuid4().hex[:12]}{suffix}"
    engine = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    try:
        with engine.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
            # A scratch database need not survive a crash of the server: commits return without
            # waiting for the WAL flush (what the tests read back is the same).
            conn.execute(text(f'ALTER DATABASE "{name}" SET synchronous_commit = off'))
    finally:
        engine.dispose()
    return make_url(admin_url).set(database=name).render_as_string(hide_password=False)


def _drop_pg_database(admin_url: str, url: str) -> None:
    name = make_url(url).database
    engine = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    try:
        with engine.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        engine.dispose()


@pytest.fixture(scope="session")
def _pg_scratch_url() -> Iterator[str]:
    admin = _pg_admin_url()
    if admin is None:
        _skip_postgres()
    from app.database import upgrade_database

    url = _create_pg_database(admin)
    try:
        upgrade_database(url)
        yield url
    finally:
        _drop_pg_database(admin, url)


@pytest.fixture(scope="session")
def _pg_emptier(_pg_scratch_url: str) -> Iterator[Callable[..., None]]:
    """Empties the scratch database before each test, over one connection kept for the session."""
    from app.tables import Base

    # DELETE is much quicker than TRUNCATE for the handful of rows a test leaves; children first.
    statements = "; ".join(f'DELETE FROM "{t.name}"' for t in reversed(Base.metadata.sorted_tables))
    engine = create_engine(_pg_scratch_url, pool_size=1, pool_pre_ping=True)

    def empty(then: str = "") -> None:
        """Empty every table, then run ``then`` (SQL) in the same transaction."""
        with engine.begin() as conn:
            conn.exec_driver_sql(f"{statements}; {then}" if then else statements)

    try:
        yield empty
    finally:
        engine.dispose()


# SQLite test databases live in memory-backed /dev/shm where there is one: a scratch database
# need not survive a power cut, and there an fsync (synchronous=FULL, every commit) costs nothing.
MEMORY_DIR = Path("/dev/shm")


@pytest.fixture(scope="session")
def _sqlite_dir(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    if not (MEMORY_DIR.is_dir() and os.access(MEMORY_DIR, os.W_OK)):
        yield tmp_path_factory.mktemp("sqlite")
        return
    path = Path(tempfile.mkdtemp(prefix="wakeledger-tests-", dir=MEMORY_DIR))
    try:
        yield path
    finally:
        shutil.rmtree(path, ignore_errors=True)


@pytest.fixture(scope="session")
def _sqlite_template(_sqlite_dir: Path) -> Path:
    from app.database import upgrade_database

    path = _sqlite_dir / "template.db"
    upgrade_database(f"sqlite:///{path}")
    return path


def sqlite_scratch_copy(template: Path, directory: Path) -> Iterator[str]:
    """The URL of a fresh copy of a SQLite template file, removed (with its WAL files) afterwards."""
    path = directory / f"{uuid.uuid4().hex}.db"
    shutil.copyfile(template, path)
    try:
        yield f"sqlite:///{path}"
    finally:
        for leftover in (path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")):
            leftover.unlink(missing_ok=True)


# --- database fixtures ---------------------------------------------------------------------------


@pytest.fixture(params=_backend_params())
def backend(request: pytest.FixtureRequest) -> str:
    if request.param == "postgresql" and _pg_admin_url() is None:
        _skip_postgres()
    return request.param


@pytest.fixture
def database_url(backend: str, request: pytest.FixtureRequest) -> Iterator[str]:
    if backend == "sqlite":
        template, directory = request.getfixturevalue("_sqlite_template"), request.getfixturevalue("_sqlite_dir")
        yield from sqlite_scratch_copy(template, directory)
        return
    request.getfixturevalue("_pg_emptier")()
    yield request.getfixturevalue("_pg_scratch_url")


@pytest.fixture(scope="session")
def _filled_once() -> dict[str, Any]:
    """What ``filled_database_url`` has filled this session: SQLite file or PostgreSQL schema by name."""
    return {}


def _pg_stash(url: str, schema: str) -> None:
    """Keep a copy of every table of the scratch database in ``schema`` (same columns, same order)."""
    from app.tables import Base

    engine = create_engine(url)
    try:
        with engine.begin() as conn:
            conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
            for table in Base.metadata.sorted_tables:
                conn.exec_driver_sql(f'CREATE TABLE "{schema}"."{table.name}" AS TABLE public."{table.name}"')
    finally:
        engine.dispose()


def _pg_restore_statements(schema: str) -> str:
    """Copy the stash back, parents first, and move each id sequence past the copied ids."""
    from app.tables import Base

    statements = []
    for table in Base.metadata.sorted_tables:
        statements.append(
            f'INSERT INTO public."{table.name}" OVERRIDING SYSTEM VALUE SELECT * FROM "{schema}"."{table.name}"'
        )
        for column in table.primary_key.columns:
            if column.type.python_type is int and len(table.primary_key.columns) == 1:
                statements.append(
                    f"SELECT setval(seq, top) FROM (SELECT pg_get_serial_sequence('public.\"{table.name}\"',"
                    f' \'{column.name}\') AS seq, (SELECT max("{column.name}") FROM public."{table.name}") AS top)'
                    " AS q WHERE seq IS NOT NULL AND top IS NOT NULL"
                )
    return "; ".join(statements)


@pytest.fixture
def filled_database_url(backend: str, request: pytest.FixtureRequest) -> Iterator[Callable[..., str]]:
    """``filled_database_url(name, fill)``: a fresh database holding what ``fill(url)`` stores in
    an empty migrated one. ``fill`` runs once per session and name; each test gets its own copy
    (SQLite: a copy of the filled file; PostgreSQL: the emptied scratch database, refilled from a
    schema that keeps the rows), so a test may write to it like to ``database_url``. ``fill``
    must be deterministic, and the same for every caller of the name."""
    done: dict[str, Any] = request.getfixturevalue("_filled_once")
    copies: list[Iterator[str]] = []

    def filled(name: str, fill: Callable[[str], None]) -> str:
        key = f"{backend}:{name}"
        if backend == "sqlite":
            directory = request.getfixturevalue("_sqlite_dir")
            if key not in done:
                path = directory / f"filled-{name}.db"
                shutil.copyfile(request.getfixturevalue("_sqlite_template"), path)
                fill(f"sqlite:///{path}")
                with contextlib.closing(sqlite3.connect(path)) as conn:  # fold the WAL into the file copied
                    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
                done[key] = path
            copy_ = sqlite_scratch_copy(done[key], directory)
            copies.append(copy_)
            return next(copy_)
        url = request.getfixturevalue("_pg_scratch_url")
        empty = request.getfixturevalue("_pg_emptier")
        if key not in done:
            empty()
            fill(url)
            schema = f"filled_{uuid.uuid4().hex[:8]}"
            _pg_stash(url, schema)
            done[key] = _pg_restore_statements(schema)
        empty(then=done[key])
        return url

    try:
        yield filled
    finally:
        for copy_ in copies:
            copy_.close()  # removes the copy


@pytest.fixture
def empty_database_url(backend: str, tmp_path: Path) -> Iterator[str]:
    if backend == "sqlite":
        yield f"sqlite:///{tmp_path / 'empty.db'}"
        return
    admin = _pg_admin_url()
    assert admin is not None
    url = _create_pg_database(admin, "_e")
    try:
        yield url
    finally:
        _drop_pg_database(admin, url)


# --- app fixtures ----------------------------------------------------------------------------------


@pytest.fixture
def settings(database_url: str):
    from app.config import Settings

    return Settings(database_url=database_url, migrate_on_start=False, demo_mode=False)


@pytest.fixture
def app(settings):
    from app.main import create_app

    application = create_app(settings)
    yield application
    application.state.engine.dispose()


@pytest.fixture
def client(app):
    from starlette.testclient import TestClient

    with TestClient(app) as test_client:
        yield test_client


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def live_server(app) -> Iterator[str]:
    import uvicorn

    sock = socket.socket()
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning", lifespan="on"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    for _ in range(500):  # bounded wait for start-up (5 s)
        if server.started:
            break
        time.sleep(0.01)
    else:
        raise RuntimeError("uvicorn did not start")
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)
        sock.close()


@pytest.fixture
def job_worker(database_url: str) -> Iterator[Callable[..., Any]]:
    import subprocess
    import sys

    started: list[subprocess.Popen[bytes]] = []

    def start(**settings: Any) -> subprocess.Popen[bytes]:
        env = {**os.environ, "WAKELEDGER_WORKER_POLL_SECONDS": "0.2"}
        env.update({f"WAKELEDGER_{k.upper()}": str(v) for k, v in settings.items()})
        command = [sys.executable, "-m", "app.cli", "--database-url", database_url, "worker", "--log-level", "warning"]
        command += ["--parent-pid", str(os.getpid())]  # gone with the test run, whatever ends it
        process = subprocess.Popen(command, env=env, cwd=REPO)
        started.append(process)
        return process

    try:
        yield start
    finally:
        for process in started:
            if process.poll() is None:
                process.kill()
            process.wait(timeout=30)


def _token(app, role: str) -> str:
    from app.services.auth import create_token

    with app.state.session_factory() as session:
        return create_token(session, role, f"test-{role}", actor="tests")


@pytest.fixture
def admin_token(app) -> str:
    return _token(app, "admin")


@pytest.fixture
def ingest_token(app) -> str:
    return _token(app, "ingest")


@pytest.fixture
def viewer_token(app) -> str:
    return _token(app, "viewer")


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


@pytest.fixture
def admin_headers(admin_token: str) -> dict[str, str]:
    return bearer(admin_token)


@pytest.fixture
def ingest_headers(ingest_token: str) -> dict[str, str]:
    return bearer(ingest_token)


@pytest.fixture
def viewer_headers(viewer_token: str) -> dict[str, str]:
    return bearer(viewer_token)


@pytest.fixture
def campaign(client, admin_headers) -> str:
    response = client.post(
        "/api/v1/campaigns",
        json={"slug": "test-campaign", "name": "Test campaign", "timezone": "UTC"},
        headers=admin_headers,
    )
    assert response.status_code == 201, response.text
    return "test-campaign"


# --- shots ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="session")
def reference_cases() -> list[dict[str, Any]]:
    return json.loads(REFERENCE_CASES_PATH.read_text())


def _set_path(doc: dict[str, Any], path: str, value: Any) -> None:
    *parents, leaf = path.split(".")
    node = doc
    for part in parents:
        node = node.setdefault(part, {})
    node[leaf] = value


def _drop_path(doc: dict[str, Any], path: str) -> None:
    *parents, leaf = path.split(".")
    node: Any = doc
    for part in parents:
        node = node.get(part, {})
    node.pop(leaf, None)


@pytest.fixture
def make_shot(reference_cases) -> Callable[..., dict[str, Any]]:
    def build(
        case: int | str = 0,
        shot_id: str | None = None,
        taken_at: str | None = None,
        changes: Mapping[str, Any] | None = None,
        drop: Sequence[str] = (),
    ) -> dict[str, Any]:
        if isinstance(case, str):
            index = next(i for i, c in enumerate(reference_cases) if c["input"]["shot_id"] == case)
        else:
            index = case
        shot = copy.deepcopy(reference_cases[index]["input"])
        shot["shot_id"] = shot_id or shot["shot_id"]
        shot["taken_at"] = taken_at or f"2026-11-17T09:{index:02d}:03.120Z"
        for path, value in (changes or {}).items():
            _set_path(shot, path, value)
        for path in drop:
            _drop_path(shot, path)
        return shot

    return build
