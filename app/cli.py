"""The ``wakeledger`` command.

Each subcommand is one function decorated with ``@command(...)``; its ``configure``
callable adds the arguments. To add one (e.g. ``export``), write::

    def _export_args(p: argparse.ArgumentParser) -> None:
        p.add_argument("--campaign", required=True)

    @command("export", help="...", configure=_export_args)
    def export(args: argparse.Namespace, settings: Settings) -> int:
        ...
        return 0

Keep the function small: parse nothing by hand, call a service, print, return the
exit code. Import heavy modules inside the function so ``wakeledger --help`` stays fast.
Two-word commands (``db upgrade``, ``token create``) are registered as "db upgrade".
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from app.advisory import ADVISORY_CAUTION
from app.config import Settings
from app.version import VERSION

Handler = Callable[[argparse.Namespace, Settings], int]


@dataclass
class Command:
    name: str
    help: str
    handler: Handler
    configure: Callable[[argparse.ArgumentParser], None] | None
    # "ready": the database must exist at the newest revision (checked before the handler runs:
    # one line naming the fix otherwise, and a missing SQLite file is never created);
    # "own": the command creates or migrates it itself (db upgrade, demo, serve, restore);
    # "none": no database, or the handler checks when it needs one.
    database: str = "ready"


COMMANDS: dict[str, Command] = {}


def command(
    name: str,
    help: str,
    configure: Callable[[argparse.ArgumentParser], None] | None = None,
    database: str = "ready",
):
    def register(fn: Handler) -> Handler:
        COMMANDS[name] = Command(name, help, fn, configure, database)
        return fn

    return register


DATABASE_HELP = (
    "the database, e.g. sqlite:///./wakeledger.db or postgresql+psycopg://user@host/db "
    "(default: DATABASE_URL, then WAKELEDGER_DATABASE_URL, then sqlite:///./wakeledger.db)"
)


def _database_option(p: argparse.ArgumentParser) -> None:
    # SUPPRESS: given before or after the command word, the one given wins; absent, settings decide.
    p.add_argument("--database-url", metavar="URL", default=argparse.SUPPRESS, help=DATABASE_HELP)


def fail(cmd: str, message: str, code: int = 1) -> int:
    """Print one ``wakeledger CMD: error: ...`` line on stderr and return the exit code."""
    print(f"wakeledger {cmd}: error: {message}", file=sys.stderr)
    return code


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="wakeledger", description=f"Shot ledger and self-modulation model check. {ADVISORY_CAUTION}"
    )
    parser.add_argument("--version", action="version", version=f"wakeledger {VERSION}")
    _database_option(parser)
    top = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    groups: dict[str, argparse._SubParsersAction] = {}
    for cmd in COMMANDS.values():
        words = cmd.name.split()
        if len(words) == 1:
            sub = top.add_parser(words[0], help=cmd.help, description=cmd.help)
        else:
            group, leaf = words
            if group not in groups:
                gp = top.add_parser(group, help=f"{group} commands")
                groups[group] = gp.add_subparsers(dest=f"{group}_command", required=True, metavar="COMMAND")
            sub = groups[group].add_parser(leaf, help=cmd.help, description=cmd.help)
        if cmd.configure:
            cmd.configure(sub)
        _database_option(sub)
        sub.set_defaults(_command=cmd)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    url = getattr(args, "database_url", None)
    settings = Settings(database_url=url) if url else Settings()
    cmd: Command = args._command
    from sqlalchemy.exc import SQLAlchemyError

    from app.database import DatabaseNotReady, check_database, shown_url

    try:
        if cmd.database == "ready":
            check_database(settings.database_url)
        return int(cmd.handler(args, settings) or 0)
    except DatabaseNotReady as exc:
        return fail(cmd.name, str(exc))
    except SQLAlchemyError as exc:  # the database went away or refused: one line, no traceback
        reason = str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]
        return fail(cmd.name, f"the database {shown_url(settings.database_url)} failed: {reason}")


# --- built-in commands ----------------------------------------------------------------------------


def _serve_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--host", default="127.0.0.1")
    p.add_argument("--port", type=int, default=8000)
    p.add_argument("--log-level", default="info")


def _local_worker(settings: Settings, database_url: str):
    """One worker process beside the server, unless WAKELEDGER_LOCAL_WORKER is false."""
    from contextlib import nullcontext

    from app.services.workers import LocalWorker

    return LocalWorker(database_url) if settings.local_worker else nullcontext()


def _listen(host: str, port: int):
    """A socket bound to host:port, before any database work; None when the port is taken."""
    import socket

    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((host, port))
    except OSError:
        sock.close()
        return None
    sock.set_inheritable(True)
    return sock


def _port_taken(cmd: str, host: str, port: int) -> int:
    return fail(cmd, f"port {port} on {host} is already in use (another wakeledger?): choose another with --port")


def _run_server(app, sock, settings: Settings, log_level: str) -> None:
    """uvicorn on the socket bound by ``_listen`` (logs as text or JSON, WAKELEDGER_LOG_FORMAT)."""
    import uvicorn

    from app.logs import uvicorn_log_config

    app.state.freeze_after_start = True  # a long-lived server (app.main's lifespan)
    config = uvicorn.Config(
        app,
        log_level=log_level,
        log_config=uvicorn_log_config(settings.log_format, log_level),
        proxy_headers=True,
    )
    uvicorn.Server(config).run(sockets=[sock])


def _revision_text(before: str | None, after: str | None) -> str:
    if before == after:
        return f"already at the latest revision ({after})"
    if before is None:
        return f"created the tables (revision {after})"
    return f"upgraded from revision {before} to {after}"


@command(
    "serve",
    help="run the API and dashboard (applies migrations first) with one local job worker",
    configure=_serve_args,
    database="own",
)
def serve(args: argparse.Namespace, settings: Settings) -> int:
    from contextlib import nullcontext

    from app.database import check_database, shown_url, upgrade_database
    from app.main import create_app
    from app.routers.open_metrics import MetricsListener, listener_address

    sock = _listen(args.host, args.port)
    if sock is None:
        return _port_taken("serve", args.host, args.port)
    metrics_at = listener_address(settings.open_metrics)  # WAKELEDGER_OPEN_METRICS=PORT or HOST:PORT
    try:
        scrape = MetricsListener(*metrics_at) if metrics_at else nullcontext()
    except OSError:
        sock.close()
        assert metrics_at is not None
        return _port_taken("serve", *metrics_at)
    with sock, scrape:
        if settings.migrate_on_start:
            before, after = upgrade_database(settings.database_url)
            print(f"database {shown_url(settings.database_url)}: {_revision_text(before, after)}", file=sys.stderr)
        else:
            check_database(settings.database_url)
        app = create_app(settings.model_copy(update={"migrate_on_start": False}))
        with _local_worker(settings, settings.database_url):
            _run_server(app, sock, settings, args.log_level)
    return 0


def _worker_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--name", help="how this worker appears in the jobs table (default: host:pid:random)")
    p.add_argument("--drain", action="store_true", help="run every queued job, then exit (instead of polling)")
    p.add_argument("--parent-pid", type=int, metavar="PID", help="stop once the process PID has ended")
    p.add_argument("--log-level", default="info")


@command(
    "worker",
    help="run background jobs (re-evaluations, detailed runs, alert deliveries) from the database's queue "
    "until stopped; start any number, on any host that reaches the database",
    configure=_worker_args,
)
def worker(args: argparse.Namespace, settings: Settings) -> int:
    import os
    from datetime import timedelta

    from app.database import make_engine, make_session_factory
    from app.logs import configure_logging
    from app.services.job_kinds import KINDS
    from app.services.workers import Worker

    configure_logging(settings.log_format, args.log_level)
    if settings.worker_niceness:
        os.nice(settings.worker_niceness)  # the web server on the same host answers first
    engine = make_engine(settings.database_url)
    try:
        runner = Worker(
            make_session_factory(engine),
            KINDS,
            name=args.name,
            lease=timedelta(seconds=settings.job_lease_seconds),
            heartbeat_s=settings.job_heartbeat_seconds,
            poll_s=settings.worker_poll_seconds,
            checkpoint_s=settings.job_checkpoint_seconds,
        )
        if args.drain:
            print(f"ran {runner.drain()} job(s)", file=sys.stderr)
        else:
            runner.run_forever(parent_pid=args.parent_pid)
    finally:
        engine.dispose()
    return 0


@command(
    "db upgrade",
    help="apply every database migration (creates the database and its tables if missing)",
    database="own",
)
def db_upgrade(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import shown_url, upgrade_database

    before, after = upgrade_database(settings.database_url)
    print(f"database {shown_url(settings.database_url)}: {_revision_text(before, after)}")
    return 0


def _duration(text: str):
    from app.times import parse_duration

    try:
        return parse_duration(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _token_args(p: argparse.ArgumentParser) -> None:
    from app.services.auth import ROLES

    p.add_argument("--role", required=True, choices=ROLES)
    p.add_argument("--name", required=True, help="who or what uses the token (shown in the audit trail)")
    p.add_argument(
        "--expires-in", type=_duration, metavar="DURATION", help="the token stops working after e.g. 90d, 12h, 2w"
    )


@command("token create", help="create an API token; prints only the token", configure=_token_args)
def token_create(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import make_engine, make_session_factory
    from app.errors import InvalidInput
    from app.services.auth import create_token

    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            raw = create_token(session, args.role, args.name, actor="cli", expires_in=args.expires_in)
    except InvalidInput as exc:
        for field, reason in exc.problems:
            print(f"wakeledger token create: error: --{field.replace('_', '-')} {reason}", file=sys.stderr)
        return 2
    finally:
        engine.dispose()
    print(raw)
    return 0


def _token_list_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--active", action="store_true", help="only tokens that work now (not revoked or expired)")


@command("token list", help="list the tokens: id, name, role, state, expiry, last use", configure=_token_list_args)
def token_list(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import make_engine, make_session_factory
    from app.services.auth import list_tokens
    from app.times import format_utc

    def when(moment) -> str:
        return format_utc(moment.replace(microsecond=0)) if moment is not None else "-"

    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            rows = list_tokens(session, include_inactive=not args.active)
    finally:
        engine.dispose()
    print(f"{'id':>5}  {'name':<24} {'role':<7} {'state':<8} {'expires':<21} {'last used':<21} sessions")
    for t in rows:
        print(
            f"{t.id:>5}  {t.name[:24]:<24} {t.role:<7} {t.state:<8} {when(t.expires_at):<21} "
            f"{when(t.last_used_at):<21} {t.sessions}"
        )
    return 0


def _token_revoke_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("token_id", type=int, metavar="ID", help="the id shown by `wakeledger token list`")


@command("token revoke", help="revoke a token now (its browser sessions end too)", configure=_token_revoke_args)
def token_revoke(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import make_engine, make_session_factory
    from app.errors import NotFound
    from app.services.auth import revoke_token

    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            revoked = revoke_token(session, args.token_id, actor="cli")
    except NotFound as exc:
        print(f"wakeledger token revoke: error: {exc.detail}", file=sys.stderr)
        return 1
    finally:
        engine.dispose()
    print(f"token {revoked.id} ({revoked.name}, {revoked.role}) is revoked", file=sys.stderr)
    return 0


def _demo_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--port", type=int, default=8000)
    p.add_argument(
        "--db",
        metavar="PATH",
        help="a SQLite file for the demo instead of the configured database (created if missing)",
    )
    p.add_argument("--log-level", default="warning")


@command(
    "demo",
    help="serve an invented demo campaign on 127.0.0.1 from the configured database (the one every "
    "other command uses); visitors read without signing in",
    configure=_demo_args,
    database="own",
)
def demo(args: argparse.Namespace, settings: Settings) -> int:
    import shlex

    from seed_demo.loader import DemoRefused, prepare_demo

    sock = _listen("127.0.0.1", args.port)
    if sock is None:
        return _port_taken("demo", "127.0.0.1", args.port)
    with sock:
        try:
            prepared = prepare_demo(args.db or settings.database_url, settings)
        except DemoRefused as exc:
            return fail("demo", str(exc))
        load = prepared.load
        what = "already loaded" if load.skipped else f"loaded {load.shots_created} shots in {load.seconds:.1f} s"
        print(f"demo campaign {load.campaign_slug!r}: {load.shots_in_campaign} shots ({what})")
        print(f"database:    {prepared.database_url}")
        print(f"dashboard:   http://127.0.0.1:{args.port}/campaigns/{load.campaign_slug}")
        print(
            f"other commands on this database (another shell): export DATABASE_URL={shlex.quote(prepared.database_url)}"
        )
        print(f"invented data. {ADVISORY_CAUTION}")
        print(f"admin token: {prepared.admin_token}")
        sys.stdout.flush()
        with _local_worker(settings, prepared.database_url):
            _run_server(prepared.app, sock, prepared.app.state.settings, args.log_level)
    return 0


def _backup_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", required=True, metavar="FILE", help="the backup file to write (must not exist yet)")


def _pg_url_text(url: str) -> str:
    """A libpq URL for pg_dump/pg_restore (without SQLAlchemy's driver name, password hidden)."""
    from app.database import shown_url

    return shown_url(url).replace("postgresql+psycopg://", "postgresql://", 1)


@command(
    "backup",
    help="copy the SQLite database to a file while the server runs (online backup); "
    "for PostgreSQL, prints the pg_dump command to use",
    configure=_backup_args,
    database="none",  # PostgreSQL: only the pg_dump line; SQLite: checked below
)
def backup(args: argparse.Namespace, settings: Settings) -> int:
    from pathlib import Path

    from app.database import backup_sqlite, check_database, sqlite_backup_revision, sqlite_file

    source = sqlite_file(settings.database_url)
    if source is None:
        url = _pg_url_text(settings.database_url)
        return fail(
            "backup",
            f"backup copies SQLite files only; for PostgreSQL run: pg_dump --format=custom --file {args.out} '{url}'",
            2,
        )
    check_database(settings.database_url)
    out = Path(args.out)
    if out.exists():
        return fail("backup", f"{out} exists already: remove it or choose another --out", 2)
    if not out.parent.is_dir():
        return fail("backup", f"directory {str(out.parent)!r} does not exist", 2)
    try:
        backup_sqlite(source, out)
    except OSError as exc:
        return fail("backup", f"could not write {str(out)!r}: {exc.strerror or exc}")
    revision = sqlite_backup_revision(out)
    print(f"wrote {out}: a copy of {source.resolve()} ({out.stat().st_size} bytes, revision {revision})")
    return 0


def _restore_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("backup_file", metavar="FILE", help="a file written by `wakeledger backup`")
    p.add_argument("--yes", action="store_true", help="replace the data of a database that has some")


@command(
    "restore",
    help="replace the SQLite database by a backup file (every row: stop writers first); "
    "for PostgreSQL, prints the pg_restore command to use",
    configure=_restore_args,
    database="own",
)
def restore(args: argparse.Namespace, settings: Settings) -> int:
    from pathlib import Path

    from app.database import head_revision, restore_sqlite, sqlite_backup_revision, sqlite_file

    target = sqlite_file(settings.database_url)
    if target is None:
        url = _pg_url_text(settings.database_url)
        return fail(
            "restore",
            "restore replaces SQLite files only; for PostgreSQL run: "
            f"pg_restore --clean --if-exists --no-owner --dbname '{url}' {args.backup_file}",
            2,
        )
    source = Path(args.backup_file)
    if not source.is_file():
        return fail("restore", f"there is no file {str(source)!r}", 2)
    try:
        revision = sqlite_backup_revision(source)
    except ValueError as exc:
        return fail("restore", str(exc), 2)
    if source.resolve() == target.resolve():
        return fail("restore", f"{source} is the database itself", 2)
    if target.exists() and target.stat().st_size > 0 and not args.yes:
        return fail("restore", f"this replaces every row of {target.resolve()}: add --yes to go ahead", 2)
    restore_sqlite(source, target)
    print(f"restored {target.resolve()} from {source} (revision {revision})")
    if revision != head_revision():
        print(f"the backup is at revision {revision}: run `wakeledger db upgrade` next", file=sys.stderr)
    return 0


class TextProgressBar:
    """A plain-text progress bar on stderr, redrawn in place; silent for small totals."""

    def __init__(
        self, label: str, minimum_total: int = 1000, width: int = 30, stream=None, unit: str = "shots"
    ) -> None:
        self.label, self.minimum_total, self.width, self.unit = label, minimum_total, width, unit
        self.stream = stream or sys.stderr
        self.shown = False

    def __call__(self, done: int, total: int) -> None:
        if total < self.minimum_total:
            return
        filled = self.width * done // total if total else self.width
        bar = "#" * filled + "-" * (self.width - filled)
        counts = f" {done}/{total} {self.unit}" if self.unit else ""
        self.stream.write(f"\r{self.label} [{bar}] {100 * done // max(total, 1):3d}%{counts}")
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            self.stream.write("\n")
            self.stream.flush()


def _export_args(p: argparse.ArgumentParser) -> None:
    from app.services.weekly.formats import EXPORT_FORMATS, EXPORT_TABLES

    p.add_argument("--campaign", required=True, metavar="SLUG")
    p.add_argument(
        "--week",
        metavar="YYYY-Www",
        help="ISO week in the campaign's timezone, e.g. 2026-W47 (default: the current week)",
    )
    p.add_argument("--format", choices=EXPORT_FORMATS, help="default: from the --out file extension")
    p.add_argument(
        "--table",
        choices=EXPORT_TABLES,
        default="shots",
        help="what a CSV holds: shots (one row per shot, the default) or summary (one row per figure of the week: "
        "counts, ranges, phase stability, density scale with its interval, changes, scaling exponents)",
    )
    p.add_argument(
        "--out",
        metavar="PATH",
        help="file to write, or a directory for the default name "
        "wakeledger-SLUG-WEEK.FORMAT (wakeledger-SLUG-WEEK-summary.csv for --table summary; "
        "default: that name in the current directory)",
    )


@command("export", help="write a campaign's weekly summary as csv, json, html or parquet", configure=_export_args)
def export(args: argparse.Namespace, settings: Settings) -> int:
    from pathlib import Path

    from app.database import make_engine, make_session_factory
    from app.errors import NotFound
    from app.services.weekly.exports import week_file, week_problems
    from app.services.weekly.formats import EXPORT_FORMATS

    def fail(message: str, code: int = 2) -> int:
        print(f"wakeledger export: error: {message}", file=sys.stderr)
        return code

    out = Path(args.out) if args.out else None
    fmt = args.format
    if fmt is None:
        suffix = out.suffix.lower().lstrip(".") if out is not None and not out.is_dir() else ""
        if suffix not in EXPORT_FORMATS and args.table == "summary":
            suffix = "csv"  # the summary table has one format
        if suffix not in EXPORT_FORMATS:
            return fail(f"give --format ({', '.join(EXPORT_FORMATS)}) or an --out file with one of those extensions")
        fmt = suffix
    week, problems = week_problems(args.week, fmt, args.table)
    if problems:
        return fail(problems[0][1])
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            try:
                ready = week_file(session, args.campaign, week, fmt, args.table)
            except NotFound as exc:
                return fail(exc.detail, 1)
    finally:
        engine.dispose()
    target = out / ready.file_name if out is not None and out.is_dir() else out or Path(ready.file_name)
    if not target.parent.is_dir():
        return fail(f"directory {str(target.parent)!r} does not exist", 1)
    label = f"{ready.campaign_slug} {ready.week.label}"
    bar = TextProgressBar(f"{label} {fmt}" if args.table == "shots" else f"{label} summary {fmt}")
    try:
        ready.write_file(target, progress=bar)
    except OSError as exc:
        bar.close()
        return fail(f"could not write {str(target)!r}: {exc.strerror or exc}", 1)
    bar.close()
    empty = " (no shots in this week)" if ready.is_empty else ""
    print(f"wrote {target}: {ready.shot_count} shots, {label} ({ready.timezone}){empty}", file=sys.stderr)
    return 0


def _import_args(p: argparse.ArgumentParser) -> None:
    from app.services.backlog_import import DEFAULT_BATCH
    from app.services.backlog_import.readers import FORMATS

    p.add_argument("file", metavar="FILE", help="CSV, Parquet, JSON lines (.jsonl), JSON or HDF5 (.h5) file of shots")
    p.add_argument("--campaign", required=True, metavar="SLUG")
    p.add_argument("--map", metavar="MAP", help="JSON or TOML file renaming the file's columns to our fields")
    p.add_argument("--format", choices=FORMATS, help="default: from the file's extension")
    p.add_argument("--table", metavar="PATH", help="HDF5: the compound dataset or the group of datasets to read")
    p.add_argument("--dry-run", action="store_true", help="check every row and list the failing ones; store nothing")
    p.add_argument("--batch-size", type=int, default=DEFAULT_BATCH, metavar="N", help="shots per stored batch")


@command(
    "import",
    help="import a backlog of shots from a file into a campaign (idempotent: re-running changes nothing)",
    configure=_import_args,
)
def import_file(args: argparse.Namespace, settings: Settings) -> int:
    from pathlib import Path

    from app.database import make_engine, make_session_factory
    from app.errors import NotFound
    from app.services.backlog_import import importing, report_lines
    from app.services.backlog_import.columns import load_map, plan_columns
    from app.services.backlog_import.readers import SourceError, read_source

    def fail(message: str, code: int = 2) -> int:
        print(f"wakeledger import: error: {message}", file=sys.stderr)
        return code

    if not 1 <= args.batch_size <= 5000:
        return fail("--batch-size must be between 1 and 5000")
    source_path = Path(args.file)
    try:
        column_map = load_map(Path(args.map)) if args.map else None
        source = read_source(source_path, args.format, args.table)
        plan = plan_columns(source.columns, column_map)
    except SourceError as exc:
        return fail(str(exc))
    engine = make_engine(settings.database_url)
    bar = TextProgressBar(f"{args.campaign} import" + (" (dry run)" if args.dry_run else ""), unit="rows")
    try:
        with make_session_factory(engine)() as session:
            report = importing.import_rows(
                session,
                args.campaign,
                source,
                plan,
                f"cli:import {source_path.name}",
                dry_run=args.dry_run,
                batch_size=args.batch_size,
                max_future=settings.max_future,
                progress=bar,
            )
    except NotFound as exc:
        return fail(exc.detail, 1)
    finally:
        bar.close()
        engine.dispose()
    for line in report_lines.lines(report, plan):
        print(line)
    return 0 if report.clean else 1


def _reevaluate_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--campaign", required=True, metavar="SLUG")


@command(
    "reevaluate",
    help="re-evaluate now, in the foreground, a campaign's shots evaluated with older "
    "settings or an older model version",
    configure=_reevaluate_args,
)
def reevaluate(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import make_engine, make_session_factory
    from app.services.campaigns import find_campaign
    from app.services.reevaluation import run_now
    from model import MODEL_VERSION

    engine = make_engine(settings.database_url)
    try:
        factory = make_session_factory(engine)
        with factory() as session:
            known = find_campaign(session, args.campaign) is not None
        if not known:
            print(f"wakeledger reevaluate: error: campaign {args.campaign!r} does not exist", file=sys.stderr)
            return 1
        bar = TextProgressBar(f"{args.campaign} re-evaluation")
        try:
            done = run_now(factory, args.campaign, "cli", lambda d, t, _message: bar(d, t))
        finally:
            bar.close()
    finally:
        engine.dispose()
    print(f"re-evaluated {done} shots of {args.campaign} with model {MODEL_VERSION}", file=sys.stderr)
    return 0


def _simulate_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("shot", metavar="SHOT.json", help="one shot in the API JSON shape")
    p.add_argument("--out", required=True, metavar="PATH", help="HTML file to write (self-contained, opens offline)")
    p.add_argument(
        "--slices-per-wavelength",
        type=int,
        default=16,
        metavar="N",
        help="slices per plasma wavelength (at least 16; default 16)",
    )
    p.add_argument(
        "--dz-m",
        type=float,
        default=None,
        metavar="DZ",
        help="integration step along the plasma in metres (default: the solver's choice)",
    )
    p.add_argument(
        "--whole-plasma",
        action="store_true",
        help="integrate to the plasma exit (default: stop 0.5 m past the saturation point)",
    )


@command(
    "simulate",
    help="run the detailed envelope solver on one shot file and write an HTML report",
    configure=_simulate_args,
    database="none",
)
def simulate(args: argparse.Namespace, settings: Settings) -> int:
    import json
    from pathlib import Path

    from app.errors import InvalidInput
    from app.services.detailed_runs.file import problem_lines, simulate_to_html
    from app.services.detailed_runs.lifecycle import parse_parameters
    from model import ShotInputError
    from model.envelope import EnvelopeSizeError

    options = {"slices_per_wavelength": "--slices-per-wavelength", "dz_m": "--dz-m"}

    def fail(lines: list[str], code: int = 2) -> int:
        for line in lines:
            print(f"wakeledger simulate: error: {line}", file=sys.stderr)
        return code

    source, out = Path(args.shot), Path(args.out)
    try:
        shot = json.loads(source.read_text(encoding="utf-8"))
    except OSError as exc:
        return fail([f"cannot read {str(source)!r}: {exc.strerror or exc}"])
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        return fail([f"{str(source)!r} is not a JSON shot: {exc}"])
    if not out.parent.is_dir():
        return fail([f"directory {str(out.parent)!r} does not exist"])
    bar = TextProgressBar(
        f"{shot.get('shot_id', source.stem) if isinstance(shot, dict) else source.stem} envelope",
        minimum_total=0,
        unit="",
    )
    try:
        params = parse_parameters(
            {
                "slices_per_wavelength": args.slices_per_wavelength,
                "dz_m": args.dz_m,
                "stop_after_saturation": not args.whole_plasma,
            }
        )
        doc = simulate_to_html(shot, params, out, progress=lambda fraction: bar(round(1000 * fraction), 1000))
    except InvalidInput as exc:
        bar.close()
        return fail([f"{options.get(field, field)}: {reason}" for field, reason in exc.problems] or [exc.detail])
    except ShotInputError as exc:
        bar.close()
        return fail([f"{str(source)!r} is not a valid shot:"] + problem_lines(exc.problems))
    except (EnvelopeSizeError, OSError) as exc:
        bar.close()
        return fail([str(exc)], 1)
    bar.close()
    n = doc["numerics"]
    print(f"wrote {out}: {n['slices']} slices x {n['steps']} steps; {doc['validity_note']}", file=sys.stderr)
    return 0


def _plan_args(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "shot",
        metavar="SHOT.json",
        help='a shot in the API JSON shape, or a stored shot {"campaign": SLUG, "shot_id": ID}',
    )
    p.add_argument(
        "--vary",
        action="append",
        required=True,
        metavar="FIELD=START:STOP:STEPS[:log]",
        help="an axis of the scan (give one or two), e.g. plasma.density_cm3=1e14:1e15:200:log",
    )
    p.add_argument("--campaign", metavar="SLUG", help="use this campaign's settings (reads the configured database)")
    p.add_argument("--out", required=True, metavar="FILE", help="its suffix picks csv, parquet, json or html")


@command(
    "plan",
    help="scan the closed-form model around a shot over one or two fields and write csv, parquet, json or html",
    configure=_plan_args,
    database="none",  # checked below when the shot or --campaign names stored data
)
def plan(args: argparse.Namespace, settings: Settings) -> int:
    import json
    from pathlib import Path

    from app.errors import InvalidInput, NotFound
    from app.services.planner import answers
    from app.services.planner.files import PLAN_FORMATS, axis_from_text, option_lines, write_plan_file
    from app.services.planner.page import status_counts_text

    def fail(lines: list[str], code: int = 2) -> int:
        for line in lines:
            print(f"wakeledger plan: error: {line}", file=sys.stderr)
        return code

    source, out = Path(args.shot), Path(args.out)
    fmt = out.suffix.lower().lstrip(".")
    if fmt not in PLAN_FORMATS:
        return fail([f"--out {str(out)!r}: give a file ending in .{', .'.join(PLAN_FORMATS)}"])
    if not out.parent.is_dir():
        return fail([f"directory {str(out.parent)!r} does not exist"], 1)
    try:
        shot = json.loads(source.read_text(encoding="utf-8"))
    except OSError as exc:
        return fail([f"cannot read {str(source)!r}: {exc.strerror or exc}"])
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        return fail([f"{str(source)!r} is not a JSON shot: {exc}"])
    try:
        axes = [axis_from_text(text, i) for i, text in enumerate(args.vary)]
        if answers.needs_database(shot, args.campaign):
            from app.database import DatabaseNotReady, check_database, make_engine, make_session_factory

            try:
                check_database(settings.database_url)
            except DatabaseNotReady as exc:
                return fail([str(exc)], 1)
            engine = make_engine(settings.database_url)
            try:
                with make_session_factory(engine)() as session:
                    base = answers.resolve_base(session, shot, args.campaign)
            finally:
                engine.dispose()
        else:
            base = answers.given_base(shot)
        result = answers.scan(base, axes)
        title = base.shot_id or str(shot.get("shot_id") or source.stem)
        write_plan_file(base, axes, result, fmt, out, title)
    except InvalidInput as exc:
        return fail(option_lines(exc.problems, args.vary, str(source)) or [exc.detail])
    except NotFound as exc:
        return fail([exc.detail], 1)
    except OSError as exc:
        return fail([f"could not write {str(out)!r}: {exc.strerror or exc}"], 1)
    print(f"wrote {out}: {status_counts_text(result)}", file=sys.stderr)
    return 0


def _calibrate_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--campaign", required=True, metavar="SLUG")
    p.add_argument("--from", dest="taken_from", metavar="ISO", help="shots taken at or after (ISO 8601 with an offset)")
    p.add_argument("--to", dest="taken_to", metavar="ISO", help="shots taken before (ISO 8601 with an offset)")
    p.add_argument("--apply", action="store_true", help="make the estimate the campaign's density_scale (re-evaluates)")


@command(
    "calibrate",
    help="the density scale with its interval and changes, the scaling checks and the drivers of a campaign",
    configure=_calibrate_args,
)
def calibrate(args: argparse.Namespace, settings: Settings) -> int:
    from app.database import make_engine, make_session_factory
    from app.errors import InvalidInput, NotFound
    from app.services.calibration import parse_instant, run_calibrate, table_text

    engine = make_engine(settings.database_url)
    bar = TextProgressBar(f"{args.campaign} calibration", minimum_total=20000)
    try:
        start, end = parse_instant(args.taken_from, "--from"), parse_instant(args.taken_to, "--to")
        result, job_id = run_calibrate(
            make_session_factory(engine), args.campaign, start, end, args.apply, "cli", lambda d, t, _m: bar(d, t)
        )
    except (InvalidInput, NotFound) as exc:
        bar.close()
        lines = [f"{field}: {reason}" for field, reason in exc.problems] or [exc.detail]
        for line in lines:
            print(f"wakeledger calibrate: error: {line}", file=sys.stderr)
        return 1 if isinstance(exc, NotFound) else 2
    finally:
        engine.dispose()
    bar.close()
    print(table_text(result))
    if job_id is not None:
        print(
            f"density_scale of {args.campaign} set to {result['density_scale']['estimate']!r}; "
            f"re-evaluation job {job_id}"
        )
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
