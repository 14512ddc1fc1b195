"""Helpers of the service benchmarks: a real `wakeledger serve` (and workers) of any checkout.

Each benchmark takes ``--repo PATH``: the checkout whose ``.venv/bin/wakeledger`` serves
(this one by default; e.g. a checkout of the code before a change, for its "before"
figures), so one script measures both sides the same way. Servers listen on a free
127.0.0.1 port, databases are scratch SQLite files or scratch PostgreSQL databases that
are dropped afterwards, every wait is bounded and every process started is stopped.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[2]
REFERENCE_CASES = REPO / "tests" / "data" / "reference_cases.json"
PG_ADMIN_URL = os.environ.get("WAKELEDGER_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def worked_example(index: int = 0) -> dict:
    return json.loads(REFERENCE_CASES.read_text())[index]["input"]


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def threads(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("Threads:"):
            return int(line.split()[1])
    return -1


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process so far."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


@contextmanager
def scratch_database(backend: str, folder: Path) -> Iterator[str]:
    """A database URL: a new SQLite file, or a new PostgreSQL database dropped afterwards."""
    if backend == "sqlite":
        yield f"sqlite:///{folder / f'bench-{uuid.uuid4().hex[:8]}.db'}"
        return
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    name = f"wl_bench_{uuid.uuid4().hex[:10]}"
    admin = create_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield make_url(PG_ADMIN_URL).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@dataclass
class Served:
    """One checkout's wakeledger on a database: its server and any workers."""

    repo: Path
    database_url: str
    port: int = field(default_factory=free_port)
    env: dict[str, str] = field(default_factory=dict)
    server: subprocess.Popen | None = None
    workers: list[subprocess.Popen] = field(default_factory=list)

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def command(self, *args: str) -> list[str]:
        script = self.repo / ".venv" / "bin" / "wakeledger"
        # without its own .venv: this interpreter runs the checkout's code (PYTHONPATH, see _env)
        start = [str(script)] if script.exists() else [sys.executable, "-m", "app.cli"]
        return [*start, "--database-url", self.database_url, *args]

    def _env(self) -> dict[str, str]:
        env = {**os.environ, "WAKELEDGER_LOCAL_WORKER": "false", **self.env}
        if not (self.repo / ".venv" / "bin" / "wakeledger").exists():
            env["PYTHONPATH"] = str(self.repo)
        return env

    def run(self, *args: str) -> str:
        return subprocess.run(
            self.command(*args), env=self._env(), check=True, capture_output=True, text=True, timeout=300
        ).stdout.strip()

    def token(self, role: str, name: str) -> str:
        return self.run("token", "create", "--role", role, "--name", name)

    def start(self, timeout_s: float = 120.0) -> None:
        self.server = subprocess.Popen(
            self.command("serve", "--port", str(self.port), "--log-level", "warning"),
            env=self._env(),
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            try:
                if httpx.get(f"{self.base}/healthz", timeout=2).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            if self.server.poll() is not None:
                raise RuntimeError(f"the server of {self.repo} exited with {self.server.returncode}")
            time.sleep(0.1)
        raise RuntimeError("the server did not answer /healthz in time")

    def kill_server(self) -> None:
        if self.server is not None and self.server.poll() is None:
            os.kill(self.server.pid, signal.SIGKILL)
            self.server.wait(timeout=30)

    def start_worker(self) -> subprocess.Popen:
        worker = subprocess.Popen(
            self.command("worker", "--log-level", "warning", "--parent-pid", str(os.getpid())),
            env=self._env(),
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        self.workers.append(worker)
        return worker

    def stop(self) -> None:
        for process in [self.server, *self.workers]:
            if process is not None and process.poll() is None:
                process.terminate()
        for process in [self.server, *self.workers]:
            if process is None:
                continue
            try:
                process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait(timeout=30)

    def has_workers(self) -> bool:
        return (
            "worker"
            in subprocess.run(
                self.command("--help"), capture_output=True, text=True, env=self._env(), timeout=60
            ).stdout
        )


def repo_argument(parser) -> None:
    parser.add_argument(
        "--repo", type=Path, default=REPO, help="the checkout that serves (its .venv); default: this one"
    )


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    if not ordered:
        return float("nan")
    return ordered[min(len(ordered) - 1, int(round(q / 100 * (len(ordered) - 1))))]
