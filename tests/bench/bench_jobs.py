"""Prints what background jobs cost the server that accepts them.

1. 50 detailed runs of worked example ex-1, each with its own dz_m (long runs), are queued
   through the API (with the queue limits raised to 60 for this; with the default limits
   the token's eleventh run already answers 429, which is printed first); then the
   server's thread count and CPU use over 10 s are read (and, where jobs run in worker
   processes, those of one worker beside it), and how long the server takes to exit
   after SIGTERM.
2. With 4 detailed runs being solved at once (in 4 worker processes, or in the server
   where it runs them itself), /healthz is asked 300 times, 20 ms apart: p50, p99, max.

Run: .venv/bin/python tests/bench/bench_jobs.py [--repo PATH] (PATH: the checkout that
serves, e.g. the code before a change). SQLite in a scratch folder; every process is
stopped at the end.
"""

from __future__ import annotations

import argparse
import signal
import sys
import tempfile
import time
from pathlib import Path

import httpx

sys.path.insert(0, str(Path(__file__).resolve().parent))
from served import Served, cpu_seconds, percentile, repo_argument, scratch_database, threads, worked_example  # noqa: E402

RUNS = 50
SLOW_DZ_M = 0.0006  # 8 m of plasma in ~13,000 steps: over a minute of solving per run


def _setup(served: Served) -> tuple[httpx.Client, dict[str, str]]:
    served.run("db", "upgrade")
    token = served.token("admin", "bench-jobs")
    headers = {"Authorization": f"Bearer {token}"}
    served.start()
    http = httpx.Client(base_url=served.base, timeout=120, headers=headers)
    http.post("/api/v1/campaigns", json={"slug": "jobs", "name": "Jobs"})
    shot = {**worked_example(0), "shot_id": "ex-1", "taken_at": "2026-11-17T09:00:00Z"}
    assert http.post("/api/v1/campaigns/jobs/shots", json=shot).status_code in (200, 201)
    return http, headers


def _queue(http: httpx.Client, count: int) -> list[str]:
    ids, refused = [], {}
    for i in range(count):
        answer = http.post("/api/v1/campaigns/jobs/shots/ex-1/detailed-runs", json={"dz_m": SLOW_DZ_M * (1 + i / 1000)})
        if answer.status_code == 202:
            ids.append(answer.json()["job_id"])
        else:
            refused.setdefault(answer.status_code, answer.json().get("detail", ""))
    for status, detail in refused.items():
        print(f"  asked {count}: HTTP {status} for the others ({detail})")
    return ids


def _cpu_share(pid: int, window_s: float = 10.0) -> float:
    start = cpu_seconds(pid)
    time.sleep(window_s)
    return (cpu_seconds(pid) - start) / window_s


def default_limits(repo: Path, tmp: Path) -> None:
    with scratch_database("sqlite", tmp) as url:
        served = Served(repo, url)
        http, _headers = _setup(served)
        try:
            print(f"with the default queue limits: {len(_queue(http, RUNS))} of {RUNS} runs accepted")
        finally:
            http.close()
            served.stop()


def queued_runs(repo: Path, tmp: Path) -> None:
    with scratch_database("sqlite", tmp) as url:
        served = Served(
            repo, url, env={"WAKELEDGER_MAX_JOBS_PER_TOKEN": "60", "WAKELEDGER_MAX_JOBS_PER_CAMPAIGN": "60"}
        )
        http, _headers = _setup(served)
        try:
            assert served.server is not None
            workers = served.has_workers()
            before = threads(served.server.pid)
            worker = served.start_worker() if workers else None
            queued = _queue(http, RUNS)
            time.sleep(5.0)
            print(f"{len(queued)} runs queued; server threads: {before} before, {threads(served.server.pid)} after")
            print(f"server CPU over 10 s: {100 * _cpu_share(served.server.pid):.0f} % of a core")
            if worker is not None:
                print(f"one worker beside it: {threads(worker.pid)} threads, "
                      f"CPU {100 * _cpu_share(worker.pid):.0f} % of a core (it solves one run at a time)")  # fmt: skip
            start = time.perf_counter()
            served.server.send_signal(signal.SIGTERM)
            try:
                served.server.wait(timeout=180)
                print(f"server exit after SIGTERM: {time.perf_counter() - start:.1f} s")
            except Exception:
                print("server exit after SIGTERM: still running after 180 s")
            if worker is not None:
                start = time.perf_counter()
                worker.send_signal(signal.SIGTERM)
                worker.wait(timeout=180)
                print(f"worker exit after SIGTERM (mid-run): {time.perf_counter() - start:.1f} s")
        finally:
            http.close()
            served.stop()


def healthz_under_load(repo: Path, tmp: Path) -> None:
    with scratch_database("sqlite", tmp) as url:
        served = Served(repo, url)
        http, _headers = _setup(served)
        try:
            workers = served.has_workers()
            idle = _probe(served.base, 100)
            if workers:
                for _ in range(4):
                    served.start_worker()
            ids = _queue(http, 4)
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline:
                states = [http.get(f"/api/v1/jobs/{i}").json() for i in ids]
                if sum(1 for j in states if j["state"] == "running" and j["done"] > 0) >= (4 if workers else 1):
                    break
                time.sleep(0.5)
            busy = _probe(served.base, 300)
            where = "4 worker processes" if workers else "the server's own threads"
            print(f"/healthz idle:  p50 {1e3 * percentile(idle, 50):.1f} ms, p99 {1e3 * percentile(idle, 99):.1f} ms")
            print(f"/healthz with 4 runs solving in {where}: p50 {1e3 * percentile(busy, 50):.1f} ms, "
                  f"p99 {1e3 * percentile(busy, 99):.1f} ms, max {1e3 * max(busy):.1f} ms")  # fmt: skip
        finally:
            http.close()
            served.stop()


def _probe(base: str, count: int) -> list[float]:
    times = []
    with httpx.Client(base_url=base, timeout=60) as probe:
        for _ in range(count):
            start = time.perf_counter()
            probe.get("/healthz")
            times.append(time.perf_counter() - start)
            time.sleep(0.02)
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    repo_argument(parser)
    args = parser.parse_args()
    print(f"repo: {args.repo}")
    with tempfile.TemporaryDirectory() as tmp:
        default_limits(args.repo, Path(tmp))
        queued_runs(args.repo, Path(tmp))
        healthz_under_load(args.repo, Path(tmp))


if __name__ == "__main__":
    main()
