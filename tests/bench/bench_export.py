"""Benchmark: export one week of 10,000 shots in each format from a temporary SQLite
database. Target: under 2 s per format, counted from the query to the finished file
(build_weekly_summary + writer + rename). Prints wall-clock and CPU time (the CPU
figure is the one to trust on a shared, busy machine); asserts nothing.

    .venv/bin/python tests/bench/bench_export.py [--shots 10000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path
from zoneinfo import ZoneInfo

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from app.database import make_engine, make_session_factory, upgrade_database  # noqa: E402
from app.services.weekly.summary import build_weekly_summary  # noqa: E402
from app.services.weekly.table import EXPORT_FORMATS, write_export_file  # noqa: E402
from app.times import IsoWeek  # noqa: E402
from tests.support.week_data import add_campaign, insert_shots, spread_over_week  # noqa: E402

TARGET_S = 2.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    week = IsoWeek.parse("2026-W47")
    with tempfile.TemporaryDirectory(prefix="wakeledger-bench-") as tmp:
        url = f"sqlite:///{tmp}/bench.db"
        upgrade_database(url)
        factory = make_session_factory(make_engine(url))
        t0 = time.perf_counter()
        with factory() as session, session.begin():
            campaign = add_campaign(session, "bench-week", "Europe/Zurich")
            tz = ZoneInfo(campaign.timezone)
            start, _ = week.bounds_utc(tz)
            insert_shots(session, campaign, spread_over_week(start, args.shots), seed=1)
            prev_start, _ = week.previous().bounds_utc(tz)
            insert_shots(session, campaign, spread_over_week(prev_start, args.shots), seed=2, prefix="p")
        print(
            f"setup: {2 * args.shots} shots stored in {time.perf_counter() - t0:.1f} s "
            f"(week {week.label} and the week before, {campaign.timezone})"
        )

        with factory() as session:
            walls, cpus = [], []
            for _ in range(args.repeat):
                t, c = time.perf_counter(), time.process_time()
                build_weekly_summary(session, campaign, week)
                walls.append(time.perf_counter() - t)
                cpus.append(time.process_time() - c)
        print(f"build_weekly_summary alone: wall best {min(walls):.3f} s, cpu best {min(cpus):.3f} s")

        print(f"load average at start: {os.getloadavg()[0]:.1f} ({os.cpu_count()} cores)")
        print(
            f"{'format':8} {'wall best':>9} {'wall worst':>10} {'cpu best':>9} {'size [MB]':>10}"
            f"  target < {TARGET_S:.0f} s"
        )
        for fmt in EXPORT_FORMATS:
            out = Path(tmp) / f"week.{fmt}"
            walls, cpus = [], []
            for _ in range(args.repeat):
                t, c = time.perf_counter(), time.process_time()
                with factory() as session:
                    summary = build_weekly_summary(session, campaign, week)
                write_export_file(summary, fmt, out)
                walls.append(time.perf_counter() - t)
                cpus.append(time.process_time() - c)
            verdict = "ok" if min(walls) < TARGET_S else "SLOW"
            print(
                f"{fmt:8} {min(walls):9.3f} {max(walls):10.3f} {min(cpus):9.3f} "
                f"{out.stat().st_size / 1e6:10.2f}  {verdict}"
            )
        print(f"load average at end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
