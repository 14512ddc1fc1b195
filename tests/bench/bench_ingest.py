"""Benchmark: shot ingest over a real `wakeledger serve` on loopback (prints figures, asserts nothing).

Measures, on varied invented shots at full precision with notes, tags and a DAQ section
(the model benchmark's shot mix, every shot different):
- batch ingest with evaluation (POST .../shots/batch, --batch-size shots per request): shots/s,
  wall and the server's CPU;
- single-shot POST from one client: requests/s and latency p50/p95/p99;
- --clients (8) concurrent clients posting single shots: latency p50/p95/p99/max and p99/p50;
- the driver-level floor: the same stored rows (shots, revisions, evaluations, flags) copied
  into another campaign straight through the driver, ``executemany`` on SQLite and ``COPY`` on
  PostgreSQL, values already in the driver's form; batch ingest as a fraction of that rate.
Targets (issue 16): SQLite >= 8,000 shots/s batched and >= 40 % of the floor; 8 concurrent
single-shot posters p99 < 5x p50, on both backends.

`--repo PATH` serves another checkout (its own .venv), for "before" figures from this script.
Servers listen on 127.0.0.1, databases are scratch files or scratch PostgreSQL databases.

    .venv/bin/python tests/bench/bench_ingest.py [--backend sqlite|postgresql|both] [--repo PATH]
        [--batches 4] [--batch-size 5000] [--singles 300] [--clients 8] [--client-shots 100]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx
import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_model import varied_columns  # noqa: E402
from served import Served, cpu_seconds, percentile, repo_argument, scratch_database  # noqa: E402

TARGET_SHOTS_PER_S = 8000
TARGET_FLOOR_FRACTION = 0.40
TARGET_P99_OVER_P50 = 5.0
NOTES = (
    "density scan step",
    "laser energy low, front late; rerun after the timing fix",
    "=looks fine",  # a cell a spreadsheet would run
    "",
    "screen 2 saturated — gain lowered",
)
TAGS = (["scan"], ["scan", "density"], [], ["calibration", "night shift"], ["seed-timing"])


def make_shots(prefix: str, n: int, seed: int) -> list[dict]:
    """n different valid shots in the API shape (invented demo values)."""
    columns = varied_columns(n, seed)
    rng = np.random.default_rng(seed + 1)
    rows = [dict() for _ in range(n)]
    for path, values in columns.items():
        section, name = path.split(".")
        for row, value in zip(rows, values.tolist(), strict=True):
            if isinstance(value, str) or not math.isnan(value):
                row.setdefault(section, {})[name] = value
    gains = rng.uniform(0.5, 2.0, n).tolist()
    shots = []
    for i, row in enumerate(rows):
        seconds = i * 7 + seed % 7
        shots.append(
            {
                "shot_id": f"{prefix}-{i:07d}",
                "taken_at": f"2026-11-{17 + seconds // 86400:02d}T{seconds // 3600 % 24:02d}:"
                f"{seconds // 60 % 60:02d}:{seconds % 60:02d}.{i % 1000:03d}Z",
                "notes": NOTES[i % len(NOTES)],
                "tags": TAGS[i % len(TAGS)],
                **row,
                "daq": {"crate": i % 8, "sequence": i, "camera_gain": gains[i], "operator": "shift-b"},
            }
        )
    return shots


def quantiles(ms: list[float]) -> str:
    p50 = percentile(ms, 50)
    return (
        f"p50 {p50:.1f} ms, p95 {percentile(ms, 95):.1f} ms, p99 {percentile(ms, 99):.1f} ms, "
        f"max {max(ms):.1f} ms; p99/p50 {percentile(ms, 99) / p50:.1f}"
    )


def post_all(base: str, headers: dict, url: str, bodies: list[bytes], latencies: list[float], errors: list) -> None:
    with httpx.Client(base_url=base, headers=headers, timeout=120) as http:
        for body in bodies:
            start = time.perf_counter()
            answer = http.post(url, content=body)
            latencies.append((time.perf_counter() - start) * 1000)
            if answer.status_code != 201:
                errors.append(f"{answer.status_code} {answer.text[:300]}")


# --- the driver-level floor -------------------------------------------------------------------------


def _sqlite_floor(path: str, source: int, target: int, batch_size: int) -> tuple[int, float, float]:
    import sqlite3

    conn = sqlite3.connect(path, isolation_level=None)
    for pragma in ("journal_mode=WAL", "foreign_keys=ON", "synchronous=FULL", "busy_timeout=30000"):
        conn.execute(f"PRAGMA {pragma}")

    def read(sql: str) -> tuple[list[str], list[tuple]]:
        cur = conn.execute(sql, (source,))
        return [d[0] for d in cur.description], cur.fetchall()

    shot_cols, shots = read("SELECT * FROM shots WHERE campaign_id = ? ORDER BY id")
    rev_cols, revs = read(
        "SELECT r.* FROM shot_revisions r JOIN shots s ON s.id = r.shot_pk WHERE s.campaign_id = ? ORDER BY r.id"
    )
    ev_cols, evals = read("SELECT * FROM evaluations WHERE campaign_id = ? ORDER BY shot_pk")
    fl_cols, flags = read("SELECT * FROM flags WHERE campaign_id = ? ORDER BY id")
    revs_by = {r[rev_cols.index("shot_pk")]: r for r in revs}
    evals_by = {e[ev_cols.index("shot_pk")]: e for e in evals}
    flags_by: dict[int, list[tuple]] = {}
    for f in flags:
        flags_by.setdefault(f[fl_cols.index("shot_pk")], []).append(f)
    i_id, i_campaign, i_shot_id = (shot_cols.index(c) for c in ("id", "campaign_id", "shot_id"))
    rev_keep = [i for i, c in enumerate(rev_cols) if c != "id"]
    fl_keep = [i for i, c in enumerate(fl_cols) if c != "id"]

    def sql(table: str, cols: list[str]) -> str:
        return f"INSERT INTO {table} ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})"

    total, wall, cpu = 0, 0.0, 0.0
    for start in range(0, len(shots), batch_size):
        chunk = shots[start : start + batch_size]
        t, c = time.perf_counter(), time.process_time()
        conn.execute("BEGIN IMMEDIATE")
        first = (conn.execute("SELECT max(id) FROM shots").fetchone()[0] or 0) + 1
        shot_rows, rev_rows, ev_rows, fl_rows = [], [], [], []
        for k, row in enumerate(chunk):
            pk, old = first + k, row[i_id]
            new = list(row)
            new[i_id], new[i_campaign], new[i_shot_id] = pk, target, "floor-" + row[i_shot_id]
            shot_rows.append(new)
            rev = revs_by[old]
            rev_rows.append(tuple(pk if rev_cols[i] == "shot_pk" else rev[i] for i in rev_keep))
            ev = evals_by[old]
            ev_rows.append(tuple(pk if n == "shot_pk" else target if n == "campaign_id" else v
                                 for n, v in zip(ev_cols, ev, strict=True)))  # fmt: skip
            for f in flags_by.get(old, ()):
                fl_rows.append(tuple(pk if fl_cols[i] == "shot_pk" else target if fl_cols[i] == "campaign_id"
                                     else f[i] for i in fl_keep))  # fmt: skip
        conn.executemany(sql("shots", shot_cols), shot_rows)
        conn.executemany(sql("shot_revisions", [rev_cols[i] for i in rev_keep]), rev_rows)
        conn.executemany(sql("evaluations", ev_cols), ev_rows)
        conn.executemany(sql("flags", [fl_cols[i] for i in fl_keep]), fl_rows)
        conn.execute("COMMIT")
        wall += time.perf_counter() - t
        cpu += time.process_time() - c
        total += len(chunk)
    conn.close()
    return total, wall, cpu


def _postgres_floor(url: str, source: int, target: int, batch_size: int) -> tuple[int, float, float]:
    import psycopg
    from sqlalchemy.engine import make_url

    u = make_url(url)
    conn = psycopg.connect(
        host=u.host, port=u.port or 5432, user=u.username, password=u.password or None, dbname=u.database
    )

    def columns(table: str) -> list[tuple[str, str]]:
        cur = conn.execute(
            "SELECT column_name, data_type FROM information_schema.columns WHERE table_name = %s "
            "ORDER BY ordinal_position",
            (table,),
        )
        return cur.fetchall()

    def read(table: str, where: str, order: str) -> tuple[list[str], list[tuple]]:
        cols = columns(table)
        select = ", ".join(f"t.{n}::text" if kind in ("json", "jsonb") else f"t.{n}" for n, kind in cols)
        rows = conn.execute(f"SELECT {select} FROM {table} t {where} ORDER BY {order}", (source,)).fetchall()
        return [n for n, _ in cols], rows

    shot_cols, shots = read("shots", "WHERE t.campaign_id = %s", "t.id")
    rev_cols, revs = read("shot_revisions", "JOIN shots s ON s.id = t.shot_pk WHERE s.campaign_id = %s", "t.id")
    ev_cols, evals = read("evaluations", "WHERE t.campaign_id = %s", "t.shot_pk")
    fl_cols, flags = read("flags", "WHERE t.campaign_id = %s", "t.id")
    conn.commit()
    revs_by = {r[rev_cols.index("shot_pk")]: r for r in revs}
    evals_by = {e[ev_cols.index("shot_pk")]: e for e in evals}
    flags_by: dict[int, list[tuple]] = {}
    for f in flags:
        flags_by.setdefault(f[fl_cols.index("shot_pk")], []).append(f)
    i_id, i_campaign, i_shot_id = (shot_cols.index(c) for c in ("id", "campaign_id", "shot_id"))
    rev_keep = [i for i, c in enumerate(rev_cols) if c != "id"]
    fl_keep = [i for i, c in enumerate(fl_cols) if c != "id"]

    def copy(cur, table: str, cols: list[str], rows: list) -> None:
        with cur.copy(f"COPY {table} ({', '.join(cols)}) FROM STDIN") as out:
            for row in rows:
                out.write_row(row)

    total, wall, cpu = 0, 0.0, 0.0
    for start in range(0, len(shots), batch_size):
        chunk = shots[start : start + batch_size]
        t, c = time.perf_counter(), time.process_time()
        with conn.cursor() as cur:
            pks = [r[0] for r in cur.execute(
                "SELECT nextval(pg_get_serial_sequence('shots', 'id')) FROM generate_series(1, %s)", (len(chunk),)
            ).fetchall()]  # fmt: skip
            shot_rows, rev_rows, ev_rows, fl_rows = [], [], [], []
            for pk, row in zip(pks, chunk, strict=True):
                old = row[i_id]
                new = list(row)
                new[i_id], new[i_campaign], new[i_shot_id] = pk, target, "floor-" + row[i_shot_id]
                shot_rows.append(new)
                rev = revs_by[old]
                rev_rows.append(tuple(pk if rev_cols[i] == "shot_pk" else rev[i] for i in rev_keep))
                ev = evals_by[old]
                ev_rows.append(tuple(pk if n == "shot_pk" else target if n == "campaign_id" else v
                                     for n, v in zip(ev_cols, ev, strict=True)))  # fmt: skip
                for f in flags_by.get(old, ()):
                    fl_rows.append(tuple(pk if fl_cols[i] == "shot_pk" else target if fl_cols[i] == "campaign_id"
                                         else f[i] for i in fl_keep))  # fmt: skip
            copy(cur, "shots", shot_cols, shot_rows)
            copy(cur, "shot_revisions", [rev_cols[i] for i in rev_keep], rev_rows)
            copy(cur, "evaluations", ev_cols, ev_rows)
            copy(cur, "flags", [fl_cols[i] for i in fl_keep], fl_rows)
        conn.commit()
        wall += time.perf_counter() - t
        cpu += time.process_time() - c
        total += len(chunk)
    conn.close()
    return total, wall, cpu


def campaign_ids(url: str) -> dict[str, int]:
    from sqlalchemy import create_engine, text

    engine = create_engine(url.replace("postgresql://", "postgresql+psycopg://", 1))
    try:
        with engine.connect() as conn:
            return {slug: pk for pk, slug in conn.execute(text("SELECT id, slug FROM campaigns"))}
    finally:
        engine.dispose()


def run(repo: Path, backend: str, tmp: Path, args: argparse.Namespace) -> None:
    with scratch_database(backend, tmp) as url:
        unlimited = {"WAKELEDGER_RATE_LIMIT_WRITES": "", "WAKELEDGER_RATE_LIMIT_EXPENSIVE_READS": ""}
        served = Served(repo, url, env=unlimited)
        served.run("db", "upgrade")
        token = served.token("admin", "bench-ingest")
        headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
        bodies = [
            json.dumps({"shots": make_shots(f"b{b}", args.batch_size, 100 + b)}).encode() for b in range(args.batches)
        ]
        singles = [json.dumps(s).encode() for s in make_shots("s", args.singles, 7)]
        concurrent = [
            [json.dumps(s).encode() for s in make_shots(f"c{k}", args.client_shots, 200 + k)]
            for k in range(args.clients)
        ]
        served.start()
        pid = served.server.pid if served.server else 0
        try:
            with httpx.Client(base_url=served.base, headers=headers, timeout=300) as http:
                for slug in ("batch", "single", "many", "floor"):
                    answer = http.post("/api/v1/campaigns", json={"slug": f"bench-{slug}", "name": slug})
                    assert answer.status_code == 201, answer.text
                http.post("/api/v1/campaigns/bench-single/shots", content=singles[0])  # warm-up
                batch_times = []
                cpu0 = cpu_seconds(pid)
                for body in bodies:
                    t = time.perf_counter()
                    answer = http.post("/api/v1/campaigns/bench-batch/shots/batch", content=body)
                    batch_times.append(time.perf_counter() - t)
                    if answer.status_code != 201:
                        raise SystemExit(f"batch failed: {answer.status_code} {answer.text[:500]}")
                batch_cpu = cpu_seconds(pid) - cpu0
            one: list[float] = []
            errors: list[str] = []
            cpu0, t = cpu_seconds(pid), time.perf_counter()
            post_all(served.base, headers, "/api/v1/campaigns/bench-single/shots", singles[1:], one, errors)
            single_wall, single_cpu = time.perf_counter() - t, cpu_seconds(pid) - cpu0
            many: list[float] = []
            threads = [
                threading.Thread(
                    target=post_all,
                    args=(served.base, headers, "/api/v1/campaigns/bench-many/shots", bodies_k, many, errors),
                )
                for bodies_k in concurrent
            ]
            cpu0, t = cpu_seconds(pid), time.perf_counter()
            for thread in threads:
                thread.start()
            for thread in threads:
                thread.join(timeout=600)
            many_wall, many_cpu = time.perf_counter() - t, cpu_seconds(pid) - cpu0
            if errors:
                raise SystemExit(f"{len(errors)} single posts failed, e.g. {errors[0]}")
        finally:
            served.stop()
        ids = campaign_ids(url)
        floor = _sqlite_floor if backend == "sqlite" else _postgres_floor
        path = url.removeprefix("sqlite:///") if backend == "sqlite" else url
        n_floor, floor_wall, floor_cpu = floor(path, ids["bench-batch"], ids["bench-floor"], args.batch_size)

    n = args.batches * args.batch_size
    rate = n / sum(batch_times)
    floor_rate = n_floor / floor_wall
    print(f"[{backend}] repo {repo}; load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    print(
        f"[{backend}] batch ingest with evaluation: {rate:,.0f} shots/s wall (per {args.batch_size}-shot request: "
        f"median {statistics.median(batch_times):.3f} s); server CPU {n / batch_cpu:,.0f} shots per CPU second "
        f"(target >= {TARGET_SHOTS_PER_S:,})"
    )
    print(
        f"[{backend}] driver-level floor ({'executemany' if backend == 'sqlite' else 'COPY'}) of the same rows: "
        f"{floor_rate:,.0f} shots/s wall, {n_floor / floor_cpu:,.0f} per client CPU second; "
        f"batch ingest / floor: {rate / floor_rate:.0%} wall (target >= {TARGET_FLOOR_FRACTION:.0%})"
    )
    print(
        f"[{backend}] one client, single shots: {len(one) / single_wall:,.0f} requests/s; {quantiles(one)}; "
        f"server CPU {single_cpu / len(one) * 1000:.1f} ms per request"
    )
    print(
        f"[{backend}] {args.clients} concurrent clients, single shots: {len(many) / many_wall:,.0f} requests/s; "
        f"{quantiles(many)} (target p99/p50 < {TARGET_P99_OVER_P50:g}); "
        f"server CPU {many_cpu / len(many) * 1000:.1f} ms per request"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    repo_argument(parser)
    parser.add_argument("--backend", choices=("sqlite", "postgresql", "both"), default="sqlite")
    parser.add_argument("--batches", type=int, default=4)
    parser.add_argument("--batch-size", type=int, default=5000)
    parser.add_argument("--singles", type=int, default=300)
    parser.add_argument("--clients", type=int, default=8)
    parser.add_argument("--client-shots", type=int, default=100, help="single shots each concurrent client posts")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="wakeledger-bench-") as tmp:
        for backend in ("sqlite", "postgresql") if args.backend == "both" else (args.backend,):
            run(args.repo, backend, Path(tmp), args)


if __name__ == "__main__":
    main()
