"""Engine and sessions: the one place that opens database connections.

SQLite gets WAL journalling, foreign keys, ``synchronous=FULL`` (an acknowledged shot
is on disk) and a busy timeout on every connection. We emit BEGIN ourselves (the
documented pysqlite recipe) so that write transactions can take the write lock up
front (``BEGIN IMMEDIATE``) instead of failing on a stale snapshot later.
PostgreSQL is reached through psycopg 3 (``postgresql+psycopg://``).
"""

from __future__ import annotations

import json
import logging
import re
import sqlite3
import threading
import time
import zlib
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import orjson
from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError
from sqlalchemy.orm import Session, sessionmaker

T = TypeVar("T")

# Connection execution option read by the SQLite "begin" hook.
_SQLITE_BEGIN = "wakeledger_sqlite_begin"
# Connection info flag: the WAL autocheckpoint is off until the connection's next transaction begins.
_CHECKPOINT_DEFERRED = "wakeledger_checkpoint_deferred"
SQLITE_AUTOCHECKPOINT_PAGES = 1000  # SQLite's own default
# Statement execution option: PostgreSQL sends the result rows in binary (the bulk reads of
# app.store.exports: floats and integers arrive as 8 bytes, not as text to parse).
BINARY_ROWS = "wakeledger_binary_rows"
log = logging.getLogger(__name__)


def normalise_url(url: str) -> str:
    """Accept plain postgres URLs and route them to psycopg 3."""
    for prefix in ("postgres://", "postgresql://"):
        if url.startswith(prefix):
            return "postgresql+psycopg://" + url[len(prefix) :]
    return url


def json_dumps(value: Any) -> str:
    """JSON columns: orjson (several times faster on 5,000-shot batches), json for what it refuses
    (integers beyond 64 bits)."""
    try:
        return orjson.dumps(value).decode()
    except TypeError:
        return json.dumps(value, ensure_ascii=False)


# Reading keeps the standard parser: orjson turns integers beyond 64 bits into floats.
_JSON = {"json_serializer": json_dumps, "json_deserializer": json.loads}


def make_engine(url: str) -> Engine:
    url = normalise_url(url)
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 30}, **_JSON)

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn, _record):  # pragma: no cover - trivial
            dbapi_conn.isolation_level = None  # BEGIN is emitted by _sqlite_begin
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA synchronous=FULL")
            cur.execute("PRAGMA busy_timeout=30000")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn):  # pragma: no cover - trivial
            if conn.info.pop(_CHECKPOINT_DEFERRED, False):
                conn.exec_driver_sql(f"PRAGMA wal_autocheckpoint={SQLITE_AUTOCHECKPOINT_PAGES}")
            mode = conn.get_execution_options().get(_SQLITE_BEGIN, "DEFERRED")
            conn.exec_driver_sql(f"BEGIN {mode}")

        return engine
    from psycopg.pq import Format  # here: a SQLite deployment never loads the driver

    engine = create_engine(url, pool_pre_ping=True, pool_size=10, max_overflow=10, **_JSON)

    @event.listens_for(engine, "before_cursor_execute")
    def _binary_rows(conn, cursor, statement, parameters, context, executemany):  # pragma: no cover - trivial
        if context is not None and context.execution_options.get(BINARY_ROWS):
            cursor.format = Format.BINARY

    return engine


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False)


@contextmanager
def transaction(factory: sessionmaker[Session]) -> Iterator[Session]:
    """A session whose work is committed on success and rolled back on any error."""
    with factory() as session, session.begin():
        yield session


@contextmanager
def snapshot_read(session: Session) -> Iterator[Session]:
    """A session whose reads all see one snapshot, for reports built from several queries.

    PostgreSQL at READ COMMITTED gives every statement its own snapshot, so a write
    committed between two queries would show in the second only: the reads run in a
    separate session whose transaction begins at REPEATABLE READ (rolled back at the end).
    SQLite: a transaction reads one snapshot already, so the caller's session serves.
    """
    engine = session.get_bind().engine
    if engine.dialect.name != "postgresql":
        yield session
        return
    with Session(engine) as read:
        read.connection(execution_options={"isolation_level": "REPEATABLE READ"})
        yield read


_SNAPSHOT_ID = re.compile(r"[0-9A-Fa-f-]+")


@contextmanager
def read_meanwhile(read: Session, work: Callable[[Session], T]) -> Iterator[Callable[[], T]]:
    """Run ``work`` (reads) on the snapshot of ``read`` (a ``snapshot_read`` session) while the
    caller goes on reading; yields the function that returns its result.

    PostgreSQL: ``work`` runs in a thread on a second session whose transaction imports the
    snapshot (``pg_export_snapshot``), so the server answers its queries while this process
    works on other rows (a weekly export waited a quarter of its time for the server, query after query).
    SQLite: ``work`` runs on ``read`` when its result is first asked for (one process does all).
    """
    engine = read.get_bind().engine
    if engine.dialect.name != "postgresql":
        results: list[T] = []

        def result() -> T:
            if not results:
                results.append(work(read))
            return results[0]

        yield result
        return
    snapshot = read.connection().exec_driver_sql("SELECT pg_export_snapshot()").scalar_one()
    if not _SNAPSHOT_ID.fullmatch(snapshot):  # it is written into the statement below
        raise ValueError(f"unexpected snapshot id {snapshot!r}")

    def on_snapshot() -> T:
        with Session(engine) as beside:
            connection = beside.connection(execution_options={"isolation_level": "REPEATABLE READ"})
            connection.exec_driver_sql(f"SET TRANSACTION SNAPSHOT '{snapshot}'")
            return work(beside)

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="read-meanwhile") as pool:
        yield pool.submit(on_snapshot).result


class WriterQueueTimeout(Exception):
    """A writer waited longer than the busy timeout for its turn (retryable, like SQLite's "database is locked")."""


class FifoLock:
    """A lock handed to its waiters in the order they came (threading.Lock promises no order)."""

    def __init__(self) -> None:
        self._mutex = threading.Lock()
        self._waiters: deque[threading.Lock] = deque()
        self._held = False

    def acquire(self, timeout: float) -> bool:
        with self._mutex:
            if not self._held:
                self._held = True
                return True
            turn = threading.Lock()
            turn.acquire()
            self._waiters.append(turn)
        if turn.acquire(timeout=timeout):
            return True  # handed over by release(): the lock is ours
        with self._mutex:
            try:
                self._waiters.remove(turn)
            except ValueError:  # handed over just as the wait ran out: ours after all
                return True
        return False

    def release(self) -> None:
        with self._mutex:
            if self._waiters:
                self._waiters.popleft().release()  # straight to the next in line; still held
            else:
                self._held = False


# One writer queue per SQLite database (by URL) in this process; other processes wait in
# SQLite's busy handler as before.
_WRITER_QUEUES: dict[str, FifoLock] = {}
_WRITER_QUEUES_LOCK = threading.Lock()
_QUEUE_TICKET = "wakeledger_writer_queue"
WRITER_QUEUE_TIMEOUT_S = 30.0  # as the busy timeout


def writer_queue(engine: Engine) -> FifoLock:
    """The in-process FIFO writer queue of a database."""
    key = engine.url.render_as_string(hide_password=False)
    with _WRITER_QUEUES_LOCK:
        return _WRITER_QUEUES.setdefault(key, FifoLock())


@event.listens_for(Session, "after_transaction_end")
def _leave_writer_queue(session: Session, transaction: Any) -> None:
    """The queue's turn ends with the session's outermost transaction (commit, rollback or close)."""
    if transaction.parent is None:
        queue = session.info.pop(_QUEUE_TICKET, None)
        if queue is not None:
            queue.release()


def _join_writer_queue(session: Session) -> None:
    """SQLite: wait in order for the turn to write, held until the transaction ends. Without it,
    concurrent writers sleep in SQLite's busy backoff and the unlucky ones wait seconds."""
    if _QUEUE_TICKET in session.info:
        return  # this transaction has its turn already
    engine = session.get_bind().engine
    if engine.dialect.name != "sqlite":
        return
    queue = writer_queue(engine)
    if not queue.acquire(WRITER_QUEUE_TIMEOUT_S):
        raise WriterQueueTimeout(f"database is locked: no turn to write within {WRITER_QUEUE_TIMEOUT_S:g} s")
    session.info[_QUEUE_TICKET] = queue


def begin_write(session: Session, lock_name: str | None = None) -> None:
    """Start a write transaction that holds the writer lock for ``lock_name``.

    SQLite: the writers of this process queue in order (``FifoLock``), then
    ``BEGIN IMMEDIATE`` (only possible as the first statement of the transaction) takes
    the database's write lock; other processes wait in SQLite's busy handler.
    PostgreSQL: a transaction-scoped advisory lock on the name, so two writers of the
    same campaign queue instead of racing on unique keys.
    """
    started = session.in_transaction()
    _join_writer_queue(session)
    try:
        if started:
            conn = session.connection()
        else:
            conn = session.connection(execution_options={_SQLITE_BEGIN: "IMMEDIATE"})
    except BaseException:
        if not session.in_transaction():  # no transaction to end: leave the queue here
            queue = session.info.pop(_QUEUE_TICKET, None)
            if queue is not None:
                queue.release()
        raise
    if conn.dialect.name == "postgresql" and lock_name is not None:
        key = zlib.crc32(lock_name.encode())  # 32-bit, fits pg_advisory_xact_lock(bigint)
        conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": key})


def defer_wal_checkpoint(session: Session) -> None:
    """SQLite: the commit of this write transaction leaves the WAL checkpoint to ``checkpoint_wal``.

    A commit that grows the WAL past SQLITE_AUTOCHECKPOINT_PAGES copies the WAL into the
    database file before it returns: about 40 ms of a 5,000-shot batch, spent while the writer
    queue waits. The commit is as durable without it (the WAL is synced; the checkpoint only
    moves pages), so the caller answers first and runs ``checkpoint_wal`` after. The next
    transaction on the connection has the autocheckpoint back, so one that is missed (a crash
    between the two) is made by a later commit. PostgreSQL: nothing to do.
    """
    conn = session.connection()
    if conn.dialect.name != "sqlite":
        return
    conn.exec_driver_sql("PRAGMA wal_autocheckpoint=0")
    conn.info[_CHECKPOINT_DEFERRED] = True


def checkpoint_wal(engine: Engine) -> None:
    """SQLite: copy the WAL's committed pages into the database file now. PASSIVE: it waits for no
    reader or writer (what they hold stays in the WAL for a later checkpoint), and returns at once
    when another checkpoint is under way. PostgreSQL: nothing to do."""
    if engine.dialect.name != "sqlite":
        return
    raw = engine.raw_connection()  # autocommit (no BEGIN is emitted for a raw connection)
    try:
        driver = raw.driver_connection
        assert driver is not None
        driver.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchall()
    except sqlite3.Error as exc:  # pragma: no cover - the next commit past the threshold checkpoints instead
        log.warning("WAL checkpoint after a batch did not run: %s", exc)
    finally:
        raw.close()


def is_retryable(exc: BaseException) -> bool:
    """Unique-key races, deadlocks, serialization failures and SQLite lock timeouts."""
    if isinstance(exc, IntegrityError | WriterQueueTimeout):
        return True
    if isinstance(exc, OperationalError):
        msg = str(exc.orig).lower() if isinstance(exc, DBAPIError) else str(exc).lower()
        return any(k in msg for k in ("locked", "deadlock", "could not serialize", "busy"))
    return False


def run_write(session: Session, work: Callable[[], T], attempts: int = 5) -> T:
    """Run ``work`` (which starts with begin_write) and commit; retry on races.

    ``work`` must be safe to repeat from scratch: it is re-run after a rollback.
    """
    for attempt in range(1, attempts + 1):
        try:
            result = work()
            session.commit()
            return result
        except Exception as exc:
            session.rollback()
            if attempt == attempts or not is_retryable(exc):
                raise
            time.sleep(0.01 * attempt)
    raise AssertionError("unreachable")


MIGRATIONS_DIR = Path(__file__).resolve().parent.parent / "migrations"


def alembic_config(url: str | None = None):
    """An Alembic Config pointing at migrations/ (no alembic.ini needed)."""
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    if url is not None:
        cfg.set_main_option("sqlalchemy.url", normalise_url(url).replace("%", "%%"))
    return cfg


def upgrade_database(url: str, revision: str = "head") -> tuple[str | None, str | None]:
    """Apply every migration up to ``revision`` (``wakeledger db upgrade``); (revision before, after)."""
    from alembic import command

    before = current_revision(url)
    command.upgrade(alembic_config(url), revision)
    return before, current_revision(url)


class DatabaseNotReady(Exception):
    """The configured database cannot serve a command: missing, unreachable, without the schema
    or at an older revision. The message is one line naming the fix."""


def sqlite_file(url: str) -> Path | None:
    """The file of a SQLite URL (None: not SQLite, or an in-memory database)."""
    from sqlalchemy.engine import make_url

    parsed = make_url(normalise_url(url))
    if parsed.get_backend_name() != "sqlite" or parsed.database in (None, "", ":memory:"):
        return None
    if parsed.database.startswith("file:"):
        return None  # a SQLite URI: its own options decide
    return Path(parsed.database)


def shown_url(url: str) -> str:
    """The URL with its password hidden, for messages."""
    from sqlalchemy.engine import make_url

    try:
        return make_url(normalise_url(url)).render_as_string(hide_password=True)
    except Exception:  # an unreadable URL is shown as given: it holds no parseable password
        return url


def head_revision() -> str | None:
    """The newest migration of this wakeledger."""
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(url: str) -> str | None:
    """The migration the database is at (None: no schema yet). Creates nothing for a missing
    SQLite file (see ``check_database``)."""
    from alembic.runtime.migration import MigrationContext

    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()
    finally:
        engine.dispose()


def _known_revision(revision: str) -> bool:
    from alembic.script import ScriptDirectory
    from alembic.util import CommandError

    try:
        return ScriptDirectory.from_config(alembic_config()).get_revision(revision) is not None
    except CommandError:
        return False


UPGRADE_HINT = "run `wakeledger db upgrade` with the same --database-url or DATABASE_URL"


def check_database(url: str) -> None:
    """Raise DatabaseNotReady unless the database exists, answers and is at the newest revision.

    A SQLite file that does not exist is reported, never created (SQLite would make an empty one).
    """
    from sqlalchemy.exc import SQLAlchemyError

    where = shown_url(url)
    path = sqlite_file(url)
    if path is not None and not path.exists():
        raise DatabaseNotReady(f"there is no database at {path.resolve()}: {UPGRADE_HINT} to create it")
    try:
        current = current_revision(url)
    except SQLAlchemyError as exc:
        reason = str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]
        raise DatabaseNotReady(f"cannot open the database {where}: {reason}") from None
    head = head_revision()
    if current is None:
        raise DatabaseNotReady(f"the database {where} has no wakeledger tables: {UPGRADE_HINT}")
    if current != head and not _known_revision(current):
        raise DatabaseNotReady(
            f"the database {where} is at revision {current}, which this wakeledger does not know "
            f"(it needs {head}): was it upgraded by a newer wakeledger?"
        )
    if current != head:
        raise DatabaseNotReady(
            f"the database {where} is at revision {current}, this wakeledger needs {head}: {UPGRADE_HINT}"
        )


def backup_sqlite(source: Path, target: Path) -> None:
    """Copy a live SQLite database to ``target`` with the standard library's online backup API
    (consistent while the server writes). Written beside the target and renamed: never half a file."""
    import os
    import sqlite3
    import tempfile

    fd, scratch = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    try:
        src = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
        try:
            dst = sqlite3.connect(scratch)
            try:
                src.backup(dst)
                dst.execute("PRAGMA journal_mode=DELETE")  # one self-contained file
            finally:
                dst.close()
        finally:
            src.close()
        os.replace(scratch, target)
    finally:
        if os.path.exists(scratch):
            os.unlink(scratch)


def sqlite_backup_revision(path: Path) -> str | None:
    """The wakeledger revision a SQLite backup file holds; ValueError when it is not one."""
    import sqlite3

    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if "alembic_version" not in tables or "shots" not in tables:
                raise ValueError(f"{path} is a SQLite file without wakeledger tables")
            row = conn.execute("SELECT version_num FROM alembic_version").fetchone()
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        raise ValueError(f"{path} is not a SQLite database ({exc})") from None
    return row[0] if row else None


def restore_sqlite(backup: Path, target: Path) -> None:
    """Replace every page of the SQLite database ``target`` (created if missing) by the backup's,
    with the online backup API: connections open elsewhere see the restored data afterwards."""
    import sqlite3

    src = sqlite3.connect(f"file:{backup}?mode=ro", uri=True)
    try:
        dst = sqlite3.connect(target, timeout=30)
        try:
            src.backup(dst)
        finally:
            dst.close()
    finally:
        src.close()
