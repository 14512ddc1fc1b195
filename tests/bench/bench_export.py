"""Benchmark: export one week of 10,000 shots in each format (prints figures, asserts nothing).

The shots are real model evaluations: varied invented shots (the model benchmark's mix, with
notes, tags and a DAQ section) stored through the ingest service, this week and the week
before, into a scratch database (SQLite file, or `--backend postgresql`: a new PostgreSQL
database dropped afterwards, analysed as autovacuum would). Each format is then written by a fresh process
(`--repo PATH`: another checkout's code, for "before" figures on the same database), counted
from the query to the finished file as `wakeledger export` does it (weekly.exports.week_file +
write_file; a checkout without it: build_weekly_summary + write_export_file): wall and CPU
time, best of --repeat, and the process's peak memory (peak RSS, and its rise over the RSS
before the export). `summary.csv` is the summary table (`--table summary`). Targets (issue 16):
under 1 s per format, peak memory under 300 MB.

    .venv/bin/python tests/bench/bench_export.py [--shots 10000] [--repeat 3] [--repo PATH]
        [--backend sqlite|postgresql]
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from datetime import timedelta
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(HERE))

from served import scratch_database  # noqa: E402

TARGET_S = 1.0
TARGET_MB = 300.0
WEEK = "2026-W47"
ZONE = "Europe/Zurich"


def rss_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def store(url: str, shots: int) -> None:
    """The campaign and two weeks of shots, through the ingest service (this checkout's)."""
    sys.path.insert(0, str(ROOT))
    from bench_ingest import make_shots

    from app.database import make_engine, make_session_factory, upgrade_database
    from app.schemas import CampaignCreate
    from app.services.campaigns import create_campaign
    from app.services.ingest.storing import ingest_shots
    from app.times import IsoWeek, campaign_zone

    upgrade_database(url)
    factory = make_session_factory(make_engine(url))
    with factory() as session:
        create_campaign(session, CampaignCreate(slug="bench-week", name="bench week", timezone=ZONE), "bench")
    week = IsoWeek.parse(WEEK)
    zone = campaign_zone(ZONE)
    for label, monday, seed in (("w", week, 1), ("p", week.previous(), 2)):
        start, _ = monday.bounds_utc(zone)
        payloads = make_shots(label, shots, seed)
        step = (7 * 86400 - 1) / shots
        for i, shot in enumerate(payloads):
            shot["taken_at"] = (start + timedelta(seconds=i * step)).isoformat().replace("+00:00", "Z")
        for first in range(0, shots, 5000):
            with factory() as session:
                chunk = payloads[first : first + 5000]
                ingest_shots(session, "bench-week", chunk, "bench", max_future=timedelta(days=30))
    engine = factory.kw["bind"]
    if engine.dialect.name == "postgresql":
        # The planner's statistics, as autovacuum gathers them soon after a load on a running
        # database (this machine's test server runs without autovacuum).
        from sqlalchemy import text

        with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
            conn.execute(text("ANALYZE"))


def one_format(url: str, fmt: str, out: Path, repeat: int) -> dict:
    """Runs in the measured checkout's code: the best time of `repeat` exports and the peak memory."""
    from app.database import make_engine, make_session_factory
    from app.times import IsoWeek

    fmt, _, table = fmt.partition(":")
    factory = make_session_factory(make_engine(url))
    week = IsoWeek.parse(WEEK)
    try:
        from app.services.weekly.exports import week_file

        def export() -> None:
            with factory() as session:
                ready = week_file(session, "bench-week", week, fmt, table or "shots")
            ready.write_file(out)
    except ImportError:  # a checkout from before week_file: the summary, then the writer
        if table:
            return {"error": "no summary table in this checkout"}
        from app.services.weekly.summary import build_weekly_summary
        from app.services.weekly.table import write_export_file  # type: ignore[attr-defined]
        from app.store.campaigns import get_campaign

        def export() -> None:
            with factory() as session:
                summary = build_weekly_summary(session, get_campaign(session, "bench-week"), week)
            write_export_file(summary, fmt, out)

    export()  # warm: imports, caches, the file's pages
    before = rss_mb()
    walls, cpus = [], []
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        export()
        walls.append(time.perf_counter() - t)
        cpus.append(time.process_time() - c)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"wall": min(walls), "wall_worst": max(walls), "cpu": min(cpus), "peak_mb": peak, "before_mb": before,
            "size_mb": out.stat().st_size / 1e6}  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--repo", type=Path, default=ROOT, help="the checkout whose code writes the files")
    parser.add_argument("--database-url", help="reuse a database stored by an earlier run (kept)")
    parser.add_argument("--backend", choices=("sqlite", "postgresql"), default="sqlite")
    parser.add_argument("--formats", help="comma-separated, e.g. csv,json (default: all and csv:summary)")
    parser.add_argument("--one", nargs=2, metavar=("FORMAT", "OUT"), help=argparse.SUPPRESS)  # the child
    args = parser.parse_args()
    if args.one:
        sys.path.insert(0, str(args.repo))
        print(json.dumps(one_format(args.database_url, args.one[0], Path(args.one[1]), args.repeat)))
        return

    with contextlib.ExitStack() as scope:
        tmp = scope.enter_context(tempfile.TemporaryDirectory(prefix="wakeledger-bench-"))
        url = args.database_url or scope.enter_context(scratch_database(args.backend, Path(tmp)))
        if not args.database_url:
            t = time.perf_counter()
            store(url, args.shots)
            print(f"setup: {2 * args.shots:,} shots ingested and evaluated in {time.perf_counter() - t:.1f} s "
                  f"(week {WEEK} and the week before, {ZONE})")  # fmt: skip
        venv = args.repo / ".venv" / "bin"
        python = venv / "python" if (venv / "wakeledger").exists() else Path(sys.executable)  # an installed .venv
        print(f"code: {args.repo}; load average at start: {os.getloadavg()[0]:.1f} ({os.cpu_count()} cores)")
        print(f"{'format':8} {'wall best':>9} {'wall worst':>10} {'cpu best':>9} {'peak RSS [MB]':>14} "
              f"{'rise [MB]':>10} {'size [MB]':>10}  target < {TARGET_S:g} s, < {TARGET_MB:g} MB")  # fmt: skip
        formats = ("csv", "json", "parquet", "html", "csv:summary")
        for fmt in args.formats.split(",") if args.formats else formats:
            out = Path(tmp) / f"week-{fmt.replace(':', '-')}"
            done = subprocess.run(
                [
                    str(python),
                    str(Path(__file__).resolve()),
                    "--one",
                    fmt,
                    str(out),
                    "--database-url",
                    url,
                    "--repeat",
                    str(args.repeat),
                    "--repo",
                    str(args.repo),
                ],  # fmt: skip
                check=True,
                capture_output=True,
                text=True,
                env={**os.environ, "PYTHONPATH": str(args.repo)},
            )
            r = json.loads(done.stdout.strip().splitlines()[-1])
            name = fmt.replace("csv:summary", "summary")
            if "error" in r:
                print(f"{name:8} {r['error']}")
                continue
            verdict = "ok" if r["wall"] < TARGET_S and r["peak_mb"] < TARGET_MB else "OVER"
            print(f"{name:8} {r['wall']:9.3f} {r['wall_worst']:10.3f} {r['cpu']:9.3f} {r['peak_mb']:14.0f} "
                  f"{r['peak_mb'] - r['before_mb']:10.0f} {r['size_mb']:10.2f}  {verdict}")  # fmt: skip
        print(f"load average at end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
