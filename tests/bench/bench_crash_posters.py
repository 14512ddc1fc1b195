"""Prints whether acknowledged shots survive crashes: 40 concurrent DAQ posters (single
shots and 20-shot batches) while the server is killed with SIGKILL three times and
restarted, and (where jobs run in worker processes) a worker solving a detailed run is
killed twice and replaced.

Afterwards, every shot that got a 2xx answer must be stored, and every batch must be
stored whole or not at all; the detailed run must finish despite its killed workers.
Run on SQLite and PostgreSQL (WAKELEDGER_TEST_POSTGRES_URL, default the local server).

Run: .venv/bin/python tests/bench/bench_crash_posters.py [--repo PATH] [--backend sqlite|postgresql]
"""

from __future__ import annotations

import argparse
import random
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx
from sqlalchemy import create_engine, text

sys.path.insert(0, str(Path(__file__).resolve().parent))
from served import Served, repo_argument, scratch_database, worked_example  # noqa: E402

POSTERS = 40
REQUESTS_PER_POSTER = 25
BATCH = 20


class Ledger:
    """What the posters were told: acknowledged shot ids, and every batch sent."""

    def __init__(self) -> None:
        self.lock = threading.Lock()
        self.acknowledged: set[str] = set()
        self.batches: list[list[str]] = []
        self.errors = 0
        self.answers: dict[int, int] = {}


def _shot(poster: int, n: int, case: int) -> dict:
    shot = worked_example(case)
    return {
        **shot,
        "shot_id": f"p{poster:02d}-{n:04d}",
        "taken_at": f"2026-11-18T{poster % 24:02d}:{n // 60 % 60:02d}:{n % 60:02d}Z",
    }


def poster(index: int, base: str, headers: dict[str, str], ledger: Ledger, deadline: float) -> None:
    rng = random.Random(index)
    n = 0
    with httpx.Client(base_url=base, headers=headers, timeout=30) as http:
        for _ in range(REQUESTS_PER_POSTER):
            if rng.random() < 0.5:
                shots = [_shot(index, n + i, rng.randrange(3)) for i in range(BATCH)]
                n += BATCH
                url, body = "/api/v1/campaigns/crash/shots/batch", {"shots": shots}
                with ledger.lock:
                    ledger.batches.append([s["shot_id"] for s in shots])
            else:
                shots = [_shot(index, n, rng.randrange(3))]
                n += 1
                url, body = "/api/v1/campaigns/crash/shots", shots[0]
            while time.monotonic() < deadline:  # a DAQ retries until it gets an answer
                try:
                    answer = http.post(url, json=body)
                except httpx.HTTPError:
                    with ledger.lock:
                        ledger.errors += 1
                    time.sleep(0.2)
                    continue
                with ledger.lock:
                    ledger.answers[answer.status_code] = ledger.answers.get(answer.status_code, 0) + 1
                    if answer.status_code in (200, 201):
                        ledger.acknowledged.update(s["shot_id"] for s in shots)
                if answer.status_code < 500:
                    break
                time.sleep(0.2)


def _wait_healthy(base: str, timeout_s: float = 120) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"{base}/healthz", timeout=2).status_code == 200:
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.1)
    raise RuntimeError("the server did not come back")


def run(repo: Path, backend: str, tmp: Path) -> None:
    with scratch_database(backend, tmp) as url:
        served = Served(repo, url, env={"WAKELEDGER_JOB_LEASE_SECONDS": "4", "WAKELEDGER_JOB_HEARTBEAT_SECONDS": "1",
                                        "WAKELEDGER_RATE_LIMIT_WRITES": ""})  # fmt: skip
        served.run("db", "upgrade")
        token = served.token("admin", "bench-crash")
        headers = {"Authorization": f"Bearer {token}"}
        served.start()
        workers = served.has_workers()
        job_id = None
        try:
            with httpx.Client(base_url=served.base, headers=headers, timeout=60) as http:
                http.post("/api/v1/campaigns", json={"slug": "crash", "name": "Crash"})
                if workers:
                    http.post("/api/v1/campaigns/crash/shots", json=_shot(99, 0, 0))
                    answer = http.post("/api/v1/campaigns/crash/shots/p99-0000/detailed-runs", json={"dz_m": 0.004})
                    job_id = answer.json()["job_id"]
                    served.start_worker()
            ledger = Ledger()
            deadline = time.monotonic() + 240
            threads = [
                threading.Thread(target=poster, args=(i, served.base, headers, ledger, deadline))
                for i in range(POSTERS)
            ]
            for t in threads:
                t.start()
            kills = []
            for round_ in range(3):
                time.sleep(2.5)
                served.kill_server()
                kills.append("server")
                served.start()
                if workers and round_ < 2:
                    time.sleep(1.0)
                    victim = served.workers.pop(0)
                    victim.kill()
                    victim.wait(timeout=30)
                    kills.append("worker")
                    served.start_worker()
            for t in threads:
                t.join(timeout=300)
            _wait_healthy(served.base)
            job = None
            if job_id is not None:
                with httpx.Client(base_url=served.base, headers=headers, timeout=60) as http:
                    end = time.monotonic() + 600
                    while time.monotonic() < end:
                        job = http.get(f"/api/v1/jobs/{job_id}").json()
                        if job["state"] in ("succeeded", "failed", "cancelled"):
                            break
                        time.sleep(1)
        finally:
            served.stop()
        engine = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
        try:
            with engine.connect() as conn:
                stored = {row[0] for row in conn.execute(text("SELECT shot_id FROM shots"))}
                evaluated = conn.execute(text("SELECT count(*) FROM evaluations")).scalar()
        finally:
            engine.dispose()
    lost = ledger.acknowledged - stored
    partial = [b for b in ledger.batches if 0 < len(set(b) & stored) < len(b)]
    print(f"{backend}: {POSTERS} posters, kills: {', '.join(kills)}; answers {dict(sorted(ledger.answers.items()))}, "
          f"{ledger.errors} connection errors retried")  # fmt: skip
    kept = len(stored - {"p99-0000"})
    print(f"{backend}: {len(ledger.acknowledged):,} shots acknowledged, {kept:,} stored ({evaluated:,} evaluations)")
    print(f"{backend}: lost: {len(lost)}; batches partly stored: {len(partial)} of {len(ledger.batches)}")
    if job is not None:
        print(f"{backend}: the detailed run whose workers were killed: {job['state']} after {job['attempts']} attempts")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    repo_argument(parser)
    parser.add_argument("--backend", choices=("sqlite", "postgresql", "both"), default="both")
    args = parser.parse_args()
    print(f"repo: {args.repo}")
    with tempfile.TemporaryDirectory() as tmp:
        for backend in ("sqlite", "postgresql") if args.backend == "both" else (args.backend,):
            run(args.repo, backend, Path(tmp))


if __name__ == "__main__":
    main()
