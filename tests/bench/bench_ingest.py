"""Benchmark: shot ingest over a real uvicorn on loopback.

Measures (prints figures, asserts nothing):
- batch ingest with evaluation (POST .../shots/batch, 5,000 shots per request): shots/s;
- single-shot POST: requests/s and latency p50/p95/p99;
- the same rows (shots, revisions, evaluations, flags) inserted raw through SQLAlchemy
  Core into the same database, and batch ingest as a fraction of that raw rate.
Targets on SQLite: >= 5,000 shots/s batched and >= 30 % of the raw insert rate.

The server runs in its own process (uvicorn, given a socket bound to 127.0.0.1 port 0)
so that client and server do not share one interpreter; it is stopped at the end.

    .venv/bin/python tests/bench/bench_ingest.py [--batches 4] [--batch-size 5000] [--singles 500]
                                                [--database-url postgresql+psycopg://...]
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402
from sqlalchemy import insert, select  # noqa: E402

from app.database import make_engine, make_session_factory, upgrade_database  # noqa: E402
from app.schemas import CampaignCreate  # noqa: E402
from app.services.auth import create_token  # noqa: E402
from app.services.campaigns import create_campaign  # noqa: E402
from app.tables import Evaluation, Flag, Shot, ShotRevision  # noqa: E402

REFERENCE_CASES = ROOT / "tests" / "data" / "reference_cases.json"
TARGET_SHOTS_PER_S = 5000
TARGET_RAW_FRACTION = 0.30


def make_shots(prefix: str, n: int) -> list[dict]:
    cases = [c["input"] for c in json.loads(REFERENCE_CASES.read_text())]
    shots = []
    for i in range(n):
        shot = copy.deepcopy(cases[i % len(cases)])
        shot["shot_id"] = f"{prefix}-{i:07d}"
        shot["taken_at"] = f"2026-11-{17 + i // 86400:02d}T{i // 3600 % 24:02d}:{i // 60 % 60:02d}:{i % 60:02d}.250Z"
        shot["plasma"]["density_cm3"] *= 1 + 1e-4 * (i % 97)
        shot["daq"] = {"crate": i % 8, "sequence": i}
        shots.append(shot)
    return shots


# uvicorn's --fd treats the socket as AF_UNIX and so skips TCP_NODELAY (40 ms stalls);
# socket.socket(fileno=...) keeps the real family.
SERVER = """
import socket, sys, uvicorn
from app.main import create_app
sock = socket.socket(fileno=int(sys.argv[1]))
uvicorn.Server(uvicorn.Config(create_app(), log_level="warning", access_log=False)).run(sockets=[sock])
"""


def start_server(database_url: str) -> tuple[subprocess.Popen, str]:
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    env = {**os.environ, "DATABASE_URL": database_url, "WAKELEDGER_MIGRATE_ON_START": "false", "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen(
        [sys.executable, "-c", SERVER, str(sock.fileno())], env=env, pass_fds=[sock.fileno()], cwd=ROOT
    )
    sock.close()
    base = f"http://127.0.0.1:{port}"
    for _ in range(300):  # bounded: 30 s
        try:
            if httpx.get(f"{base}/healthz", timeout=1).status_code == 200:
                return proc, base
        except httpx.HTTPError:
            pass
        time.sleep(0.1)
    proc.kill()
    raise SystemExit("server did not start")


def process_cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process (Linux /proc), to read figures on a busy machine."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def percentile(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q / 100 * (len(ordered) - 1))))]


def raw_insert_rate(
    factory, campaign_id: int, source_campaign_id: int, batch_size: int, batches: int
) -> tuple[float, float]:
    """Copy the stored rows of the batch campaign into another campaign with Core inserts;
    (shots per wall second, shots per CPU second)."""
    with factory() as session:
        shot_cols = [c for c in Shot.__table__.columns if c.name != "id"]
        shots = [
            dict(r._mapping)
            for r in session.execute(select(*shot_cols).where(Shot.campaign_id == source_campaign_id).order_by(Shot.id))
        ]
        pks = list(session.scalars(select(Shot.id).where(Shot.campaign_id == source_campaign_id).order_by(Shot.id)))
        ev_cols = [c for c in Evaluation.__table__.columns]
        evals = {
            r.shot_pk: dict(r._mapping)
            for r in session.execute(select(*ev_cols).where(Evaluation.campaign_id == source_campaign_id))
        }
        flag_cols = [c for c in Flag.__table__.columns if c.name != "id"]
        flags: dict[int, list[dict]] = {}
        for r in session.execute(select(*flag_cols).where(Flag.campaign_id == source_campaign_id)):
            flags.setdefault(r.shot_pk, []).append(dict(r._mapping))
    total = 0
    elapsed = cpu = 0.0
    for b in range(batches):
        chunk = range(b * batch_size, min((b + 1) * batch_size, len(shots)))
        shot_rows = [{**shots[i], "campaign_id": campaign_id, "shot_id": "raw-" + shots[i]["shot_id"]} for i in chunk]
        start = time.perf_counter()
        cpu_start = time.process_time()
        with factory() as session:
            new_pks = [
                pk
                for (pk,) in session.execute(
                    insert(Shot.__table__).returning(Shot.__table__.c.id, sort_by_parameter_order=True), shot_rows
                )
            ]
            session.execute(
                insert(ShotRevision.__table__),
                [
                    dict(
                        shot_pk=pk,
                        revision=1,
                        raw_payload=row["raw_payload"],
                        payload_sha256=row["payload_sha256"],
                        reason="first version",
                        author="bench",
                        created_at=row["created_at"],
                    )
                    for pk, row in zip(new_pks, shot_rows, strict=False)
                ],
            )
            session.execute(
                insert(Evaluation.__table__),
                [
                    {**evals[pks[i]], "shot_pk": pk, "campaign_id": campaign_id}
                    for i, pk in zip(chunk, new_pks, strict=False)
                ],
            )
            flag_rows = [
                {**f, "shot_pk": pk, "campaign_id": campaign_id}
                for i, pk in zip(chunk, new_pks, strict=False)
                for f in flags.get(pks[i], [])
            ]
            if flag_rows:
                session.execute(insert(Flag.__table__), flag_rows)
            session.commit()
        elapsed += time.perf_counter() - start
        cpu += time.process_time() - cpu_start
        total += len(shot_rows)
    return total / elapsed, total / cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--batches", type=int, default=4)
    parser.add_argument("--batch-size", type=int, default=5000)
    parser.add_argument("--singles", type=int, default=500)
    parser.add_argument("--database-url", help="default: a temporary SQLite file")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory(prefix="wakeledger-bench-") as tmp:
        url = args.database_url or f"sqlite:///{tmp}/bench.db"
        upgrade_database(url)
        engine = make_engine(url)
        factory = make_session_factory(engine)
        stamp = str(int(time.time()))
        with factory() as session:
            token = create_token(session, "ingest", "bench", actor="bench")
        ids = {}
        for slug in ("bench-batch", "bench-single", "bench-raw"):
            slug = f"{slug}-{stamp}"
            with factory() as session:
                ids[slug.rsplit("-", 1)[0]] = (
                    slug,
                    create_campaign(session, CampaignCreate(slug=slug, name=slug), "bench").id,
                )
        backend = engine.dialect.name
        print(f"backend: {backend}; batches: {args.batches} x {args.batch_size}; single posts: {args.singles}")

        proc, base = start_server(url)
        try:
            headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
            with httpx.Client(base_url=base, headers=headers, timeout=120) as http:
                slug = ids["bench-batch"][0]
                bodies = [
                    json.dumps({"shots": make_shots(f"b{b}", args.batch_size)}).encode() for b in range(args.batches)
                ]
                batch_times = []
                cpu_before = process_cpu_seconds(proc.pid)
                for body in bodies:
                    start = time.perf_counter()
                    response = http.post(f"/api/v1/campaigns/{slug}/shots/batch", content=body)
                    batch_times.append(time.perf_counter() - start)
                    if response.status_code != 201:
                        raise SystemExit(f"batch failed: {response.status_code} {response.text[:500]}")
                batch_rate = args.batches * args.batch_size / sum(batch_times)
                batch_cpu = process_cpu_seconds(proc.pid) - cpu_before

                slug = ids["bench-single"][0]
                singles = [json.dumps(s).encode() for s in make_shots("s", args.singles)]
                latencies = []
                cpu_before = process_cpu_seconds(proc.pid)
                start_all = time.perf_counter()
                for body in singles:
                    start = time.perf_counter()
                    response = http.post(f"/api/v1/campaigns/{slug}/shots", content=body)
                    latencies.append(time.perf_counter() - start)
                    if response.status_code != 201:
                        raise SystemExit(f"single post failed: {response.status_code} {response.text[:500]}")
                single_rate = args.singles / (time.perf_counter() - start_all)
                single_cpu = process_cpu_seconds(proc.pid) - cpu_before
        finally:
            proc.terminate()
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()

        raw_rate, raw_cpu_rate = raw_insert_rate(
            factory, ids["bench-raw"][1], ids["bench-batch"][1], args.batch_size, args.batches
        )
        engine.dispose()

    ms = [x * 1000 for x in latencies]
    n_batch = args.batches * args.batch_size
    print(
        f"load average at the end: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores "
        "(wall-clock rates drop on a busy machine; the CPU rates do not)"
    )
    print(
        f"batch ingest with evaluation: {batch_rate:,.0f} shots/s "
        f"(per {args.batch_size}-shot request: median {statistics.median(batch_times):.3f} s, "
        f"max {max(batch_times):.3f} s; target >= {TARGET_SHOTS_PER_S:,} shots/s); "
        f"server CPU: {n_batch / batch_cpu:,.0f} shots per CPU second"
    )
    print(
        f"single-shot POST: {single_rate:,.0f} requests/s; latency p50 {percentile(ms, 50):.1f} ms, "
        f"p95 {percentile(ms, 95):.1f} ms, p99 {percentile(ms, 99):.1f} ms; "
        f"server CPU {single_cpu / args.singles * 1000:.1f} ms per request"
    )
    print(f"raw Core insert of the same rows: {raw_rate:,.0f} shots/s; {raw_cpu_rate:,.0f} shots per CPU second")
    print(
        f"batch ingest / raw insert: {batch_rate / raw_rate:.0%} wall-clock, "
        f"{n_batch / batch_cpu / raw_cpu_rate:.0%} by CPU (target >= {TARGET_RAW_FRACTION:.0%})"
    )


if __name__ == "__main__":
    main()
