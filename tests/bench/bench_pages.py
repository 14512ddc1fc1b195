"""Benchmark: dashboard pages on a 100,000-shot campaign (SQLite). Prints figures only.

Builds an invented campaign in a temp SQLite database (inputs generated with numpy,
evaluated by model.evaluate_table in one call, rows bulk-inserted with SQLAlchemy Core
using the ingest service's evaluation_rows (app.services.ingest.evaluation)), then times the overview, its regime-map
feed, the live feed and the shot table (several filters and sorts) through an
in-process TestClient. Targets: under 1 s server time and under 3 MB per response.

    .venv/bin/python tests/bench/bench_pages.py [--shots 100000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import hashlib
import statistics
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from sqlalchemy import insert  # noqa: E402

from app.config import Settings  # noqa: E402
from app.database import upgrade_database  # noqa: E402
from app.tables import Campaign, Evaluation, Flag, Shot  # noqa: E402

TARGET_SECONDS = 1.0
TARGET_BYTES = 3 * 1024 * 1024


def invented_columns(n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """An invented scan around one working point, with a share of off-regime shots."""
    density = 4.0e14 * (1 + 0.002 * rng.standard_normal(n))
    wide = rng.random(n) < 0.03  # wide beams: outside
    unseeded = rng.random(n) < 0.05  # marginal
    off_freq = rng.random(n) < 0.06  # density mismatch: marginal / outside
    freq = 179.6 * (1 + 0.001 * rng.standard_normal(n)) * np.where(off_freq, 1 + rng.uniform(0.02, 0.07, n), 1.0)
    method = np.where(unseeded, "none", "ionization_front").astype(object)
    return {
        "driver.species": np.full(n, "proton", dtype=object),
        "driver.momentum_gev": np.full(n, 250.0),
        "driver.population": 2.0e11 * (1 + 0.03 * rng.standard_normal(n)),
        "driver.sigma_z_mm": 70.0 * (1 + 0.01 * rng.standard_normal(n)),
        "driver.sigma_r_mm": np.where(wide, 0.6, 0.18) * (1 + 0.02 * rng.standard_normal(n)),
        "driver.emittance_n_mm_mrad": np.full(n, 2.5),
        "driver.offset_x_mm": 0.02 * rng.standard_normal(n),
        "driver.offset_y_mm": np.zeros(n),
        "driver.angle_x_mrad": np.zeros(n),
        "driver.angle_y_mrad": np.zeros(n),
        "plasma.density_cm3": density,
        "plasma.gradient_pct_per_m": np.full(n, 0.2),
        "plasma.length_m": np.full(n, 8.0),
        "plasma.ion_mass_amu": np.full(n, 39.948),
        "plasma.ion_charge": np.full(n, 1.0),
        "seed.method": method,
        "seed.position_mm": np.where(unseeded, np.nan, 35.0 + 0.5 * rng.standard_normal(n)),
        "measured.modulation_freq_ghz": freq,
        "measured.modulation_phase_rad": 0.25 * rng.standard_normal(n),
    }


def build_campaign(url: str, n: int) -> float:
    import model
    from app.database import make_engine
    from app.services.ingest.evaluation import evaluation_rows

    start = time.perf_counter()
    rng = np.random.default_rng(20261201)
    cols = invented_columns(n, rng)
    table = model.evaluate_table(cols, None)
    engine = make_engine(url)
    now = datetime.now(UTC)
    t0 = datetime(2026, 10, 1, tzinfo=UTC)
    with engine.begin() as conn:
        conn.execute(
            insert(Campaign),
            [
                dict(
                    id=1,
                    slug="bench",
                    name="Bench campaign",
                    timezone="UTC",
                    description="invented",
                    model_settings={},
                    settings_version=1,
                    created_at=now,
                )
            ],
        )
        chunk = 20000
        for lo in range(0, n, chunk):
            hi = min(n, lo + chunk)
            rows = []
            for i in range(lo, hi):
                row = {
                    "id": i + 1,
                    "campaign_id": 1,
                    "shot_id": f"b-{i:06d}",
                    "taken_at": t0 + timedelta(seconds=40 * i),
                    "revision": 1,
                    "notes": "bench shot" if i % 10 else "bench shot with a note about the seed",
                    "tags": ["scan-a"] if i % 2 else ["scan-b"],
                    "raw_payload": {"shot_id": f"b-{i:06d}"},
                    "payload_sha256": hashlib.sha256(str(i).encode()).hexdigest(),
                    "created_at": now,
                    "updated_at": now,
                }
                for path, values in cols.items():
                    v = values[i]
                    if isinstance(v, float) and np.isnan(v):
                        v = None
                    row[path.replace(".", "_")] = v if not isinstance(v, np.floating) else float(v)
                rows.append(row)
            conn.execute(insert(Shot), rows)
            part = {k: np.asarray(v)[lo:hi] for k, v in table.items()}
            evals, flags = evaluation_rows(part, list(range(lo + 1, hi + 1)), 1, 1, now)
            conn.execute(insert(Evaluation), evals)
            if flags:
                conn.execute(insert(Flag.__table__), flags)
    engine.dispose()
    return time.perf_counter() - start


def measure(client, path: str, repeat: int) -> tuple[float, float, int, int]:
    times, size, status = [], 0, 0
    for _ in range(repeat):
        t = time.perf_counter()
        response = client.get(path)
        times.append(time.perf_counter() - t)
        size, status = len(response.content), response.status_code
    return statistics.median(times), max(times), size, status


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--db", type=Path, help="keep the database here and reuse it when it exists")
    parser.add_argument("--no-csv", action="store_true", help="skip the full CSV download")
    args = parser.parse_args()

    from starlette.testclient import TestClient

    from app.main import create_app
    from app.services.auth import create_token
    from tests.support.sessions import sign_in

    with tempfile.TemporaryDirectory() as tmp:
        path = args.db or Path(tmp) / "bench.db"
        url = f"sqlite:///{path}"
        if not path.exists():
            upgrade_database(url)
            built = build_campaign(url, args.shots)
            print(f"built {args.shots:,} shots in {built:.1f} s")
        app = create_app(Settings(database_url=url, migrate_on_start=False))
        with TestClient(app) as client:
            with app.state.session_factory() as session:
                token = create_token(session, "viewer", "bench", actor="bench")
            sign_in(client, token)
            paths = [
                "/campaigns",
                "/campaigns/bench",
                "/campaigns/bench/charts/timeline.json",
                "/campaigns/bench/charts/phase.json",
                "/campaigns/bench/charts/calibration.json",
                "/campaigns/bench/regime.json?x=plasma_density_cm3&y=efolds_exit",
                "/campaigns/bench/regime.json?x=driver_sigma_r_mm&y=hosing_ratio",
                f"/campaigns/bench/live?since={args.shots - 50}",
                "/campaigns/bench/live?since=0",
                "/campaigns/bench/shots",
                "/campaigns/bench/shots?page=500",
                "/campaigns/bench/shots?status=outside",
                "/campaigns/bench/shots?flag=DENSITY_MISMATCH&sort=plasma_density_cm3&dir=asc",
                "/campaigns/bench/shots?q=seed&sort=status",
                "/campaigns/bench/shots?from=2026-10-10T00:00&to=2026-10-20T00:00&seed=none",
                "/campaigns/bench/shots/b-050000",
            ]
            client.get("/campaigns/bench")  # warm caches (templates, imports)
            print(f"{'page':78s} {'median s':>9s} {'max s':>7s} {'bytes':>10s}  ok?")
            worst_time, worst_size = 0.0, 0
            for path in paths:
                median, worst, size, status = measure(client, path, args.repeat)
                ok = status == 200 and median < TARGET_SECONDS and size < TARGET_BYTES
                worst_time, worst_size = max(worst_time, median), max(worst_size, size)
                print(f"{path:78s} {median:9.3f} {worst:7.3f} {size:10,d}  {'yes' if ok else 'NO'} ({status})")
            if not args.no_csv:
                t = time.perf_counter()
                response = client.get("/campaigns/bench/shots.csv")
                csv_time = time.perf_counter() - t
                print(
                    f"{'/campaigns/bench/shots.csv (all 100k rows, streamed)':78s} {csv_time:9.3f} {'':7s} "
                    f"{len(response.content):10,d}"
                )
            overview = [p for p in paths if p.startswith(("/campaigns/bench/charts", "/campaigns/bench/regime"))]
            total_bytes = sum(len(client.get(p).content) for p in ["/campaigns/bench", *overview[:4]])
            print(f"overview page + its chart feeds (default regime map): {total_bytes / 1e6:.2f} MB in total")
            print(
                f"worst median time {worst_time:.3f} s (target < {TARGET_SECONDS} s); "
                f"largest payload {worst_size / 1e6:.2f} MB (target < {TARGET_BYTES / 1e6:.2f} MB)"
            )
        app.state.engine.dispose()


if __name__ == "__main__":
    main()
