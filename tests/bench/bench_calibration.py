"""Benchmark: the calibration answer (GET /api/v1/campaigns/{slug}/calibration) for a
100,000-shot campaign on SQLite. Prints figures only; target under 2 s.

The campaign is invented (tests/support/calibration_shots.py: a density diagnostic reading low
by 1.5 % that steps to 3 % at shot 60,000, halo radius and witness energy from the project
proxies) and stored the way bench_pages.py stores its campaign (bulk Core inserts of the
ingest service's evaluation rows). Times the whole answer in-process (wall and CPU), its
parts (read, model at density_scale 1, statistics), and the API call through a TestClient.

    .venv/bin/python tests/bench/bench_calibration.py [--shots 100000] [--repeat 3] [--db PATH]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from app.config import Settings  # noqa: E402
from app.database import upgrade_database  # noqa: E402

TARGET_SECONDS = 2.0


def _columns(n: int, _rng: np.random.Generator) -> dict[str, np.ndarray]:
    from tests.support.calibration_shots import synthetic_columns

    cases = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
    return synthetic_columns(cases[0]["input"], n, scale=1.015, scale_after=1.03, step_at=int(0.6 * n), seed=20261202)


def _timed(fn, repeat: int):
    walls, cpus, result = [], [], None
    for _ in range(repeat):
        w, c = time.perf_counter(), time.process_time()
        result = fn()
        walls.append(time.perf_counter() - w)
        cpus.append(time.process_time() - c)
    return statistics.median(walls), statistics.median(cpus), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--db", type=Path, help="keep the database here and reuse it when it exists")
    args = parser.parse_args()

    from starlette.testclient import TestClient

    from app.main import create_app
    from app.services import calibration
    from app.services.auth import create_token
    from app.services.ingest.evaluation import model_columns
    from model import calibration as cal
    from tests.bench import bench_pages

    bench_pages.invented_columns = _columns  # the calibration truths instead of the pages' scan
    with tempfile.TemporaryDirectory() as tmp:
        path = args.db or Path(tmp) / "bench.db"
        url = f"sqlite:///{path}"
        if not path.exists():
            upgrade_database(url)
            built = bench_pages.build_campaign(url, args.shots)
            print(f"built {args.shots:,} shots in {built:.1f} s")
        app = create_app(Settings(database_url=url, migrate_on_start=False))
        with TestClient(app) as client:
            factory = app.state.session_factory
            with factory() as session:
                token = create_token(session, "viewer", "bench", actor="bench")
            print(f"{'part':52s} {'wall s':>8s} {'cpu s':>8s}")

            def whole():
                with factory() as session:
                    return calibration.calibration_answer(session, "bench")

            wall, cpu, answer = _timed(whole, args.repeat)
            print(
                f"{'calibration answer (service, in-process)':52s} {wall:8.3f} {cpu:8.3f}  "
                f"{'yes' if wall < TARGET_SECONDS else 'NO'}"
            )

            def read():
                with factory() as session:
                    campaign = calibration.require_campaign(session, "bench")
                    return calibration._read(session, campaign, None, None, None)

            wall, cpu, rows = _timed(read, args.repeat)
            print(f"{'  read the shots (store.iter_calibration_rows)':52s} {wall:8.3f} {cpu:8.3f}")
            wall, cpu, columns = _timed(lambda: model_columns(rows), args.repeat)
            print(f"{'  model columns from the rows':52s} {wall:8.3f} {cpu:8.3f}")
            wall, cpu, ratios = _timed(lambda: cal.density_scale_ratios(columns, {}), args.repeat)
            print(f"{'  c_i at density_scale 1 (model.evaluate_table)':52s} {wall:8.3f} {cpu:8.3f}")
            wall, cpu, _ = _timed(lambda: (cal.scale_interval(ratios), cal.scale_changes(ratios)), args.repeat)
            print(f"{'  scale interval and changes':52s} {wall:8.3f} {cpu:8.3f}")
            outcome = columns["measured.halo_radius_mm"]
            inputs = {p: columns[p] for p in calibration.DRIVER_INPUTS}
            wall, cpu, _ = _timed(lambda: cal.rank_drivers(outcome, inputs), args.repeat)
            print(f"{'  drivers of one outcome (of 6)':52s} {wall:8.3f} {cpu:8.3f}")
            headers = {"Authorization": f"Bearer {token}"}
            wall, cpu, response = _timed(
                lambda: client.get("/api/v1/campaigns/bench/calibration", headers=headers), args.repeat
            )
            print(
                f"{'GET /api/v1/campaigns/bench/calibration':52s} {wall:8.3f} {cpu:8.3f}  "
                f"{len(response.content):,d} bytes"
            )
            scale = answer["density_scale"]
            print(
                f"\nshots {answer['shots']:,}; scale {scale['estimate']:.5f} [{scale['low']:.5f}, {scale['high']:.5f}] "
                f"({scale['interval_method']}); changes at "
                + ", ".join(
                    f"{c['shot_id']} ({c['before']['estimate']:.4f} -> {c['after']['estimate']:.4f})"
                    for c in answer["changes"]
                )
            )
            for s in answer["scaling"]:
                print(
                    f"  {s['diagnostic']:36s} b = {s['exponent']:.3f} "
                    f"[{s['exponent_low']:.3f}, {s['exponent_high']:.3f}], {len(s['outliers'])} outliers"
                )
            print(f"target: under {TARGET_SECONDS} s for the whole answer")


if __name__ == "__main__":
    main()
