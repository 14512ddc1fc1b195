"""Benchmark: the calibration answer (GET /api/v1/campaigns/{slug}/calibration) for a
100,000-shot campaign. Prints figures only; target under 2 s.

The campaign is invented (tests/support/calibration_shots.py: a density diagnostic reading low
by 1.5 % that steps to 3 % at shot 60,000, halo radius and witness energy from the project
proxies), stored the way bench_pages.py stores its campaign (bulk Core inserts of the ingest
service's evaluation rows), and each shot's raw payload is then set to what the API stores: the
shot body with a ``daq`` section whose ``run`` tags runs of 40 to 400 shots (so the per-run
series and its JSON extraction are measured on payloads of a real size). Times the whole answer
in-process (wall and CPU, median of ``--repeat``), its parts (the lean read of every shot, the
inputs of the few shots that need more, the statistics) and the API call through a TestClient.

``--baseline CHECKOUT`` first runs CHECKOUT's own copy of this script (its .venv) on the same
SQLite database, so "before" and "after" are measured side by side in the same conditions.

    .venv/bin/python tests/bench/bench_calibration.py [--shots 100000] [--repeat 3] [--db PATH]
        [--database-url URL] [--baseline CHECKOUT]
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from app.config import Settings  # noqa: E402

TARGET_SECONDS = 2.0
SLUG = "bench"


def _columns(n: int, _rng: np.random.Generator) -> dict[str, np.ndarray]:
    from tests.support.calibration_shots import synthetic_columns

    cases = json.loads((ROOT / "tests" / "data" / "reference_cases.json").read_text())
    return synthetic_columns(cases[0]["input"], n, scale=1.015, scale_after=1.03, step_at=int(0.6 * n), seed=20261202)


def _run_numbers(n: int) -> np.ndarray:
    """A run number per shot: runs of 40 to 400 shots, numbered from 1001."""
    rng = np.random.default_rng(20261203)
    sizes = rng.integers(40, 401, size=n // 40 + 1)
    return np.repeat(np.arange(1001, 1001 + sizes.size), sizes)[:n]


def _store_payloads(url: str) -> None:
    """Each shot's raw payload as the API stores it (canonical JSON of the body) with a daq section."""
    from sqlalchemy import bindparam, select, update

    from app.database import make_engine
    from app.tables import Shot

    engine = make_engine(url)
    with engine.begin() as conn:
        inputs = [c for c in Shot.__table__.c if c.name.split("_")[0] in ("driver", "plasma", "seed", "measured")]
        rows = conn.execute(select(Shot.id, Shot.shot_id, Shot.taken_at, *inputs).order_by(Shot.id)).all()
        runs = _run_numbers(len(rows))
        values = []
        for i, row in enumerate(rows):
            body: dict = {"shot_id": row.shot_id, "taken_at": row.taken_at.isoformat().replace("+00:00", "Z")}
            for column in inputs:
                value = getattr(row, column.name)
                if value is not None:
                    section, key = column.name.split("_", 1)
                    body.setdefault(section, {})[key] = value
            body["daq"] = {"run": int(runs[i]), "crew": "C", "shift": "early" if i % 2 else "late"}
            values.append({"pk": row.id, "payload": body})
        stmt = update(Shot.__table__).where(Shot.__table__.c.id == bindparam("pk"))
        for lo in range(0, len(values), 10000):
            conn.execute(stmt.values(raw_payload=bindparam("payload")), values[lo : lo + 10000])
    engine.dispose()


def _build(url: str, n: int) -> None:
    from tests.bench import bench_pages

    bench_pages.invented_columns = _columns  # the calibration truths instead of the pages' scan
    built = bench_pages.build_campaign(url, n)
    t = time.perf_counter()
    _store_payloads(url)
    print(f"built {n:,} shots in {built:.1f} s, payloads with run tags in {time.perf_counter() - t:.1f} s")


def _exists(url: str) -> bool:
    from sqlalchemy import inspect, select

    from app.database import make_engine
    from app.tables import Campaign

    engine = make_engine(url)
    try:
        if "campaigns" not in inspect(engine).get_table_names():
            return False
        with engine.connect() as conn:
            return conn.execute(select(Campaign.id).where(Campaign.slug == SLUG)).first() is not None
    finally:
        engine.dispose()


def _timed(fn, repeat: int):
    walls, cpus, result = [], [], None
    for _ in range(repeat):
        w, c = time.perf_counter(), time.process_time()
        result = fn()
        walls.append(time.perf_counter() - w)
        cpus.append(time.process_time() - c)
    return statistics.median(walls), statistics.median(cpus), result


def _baseline(checkout: Path, db: Path, args: argparse.Namespace) -> None:
    script = checkout / "tests" / "bench" / "bench_calibration.py"
    command = [str(checkout / ".venv" / "bin" / "python"), str(script), "--db", str(db), "--shots", str(args.shots)]
    print(f"=== before: {checkout} (its own copy of this script, same database) ===", flush=True)
    subprocess.run([*command, "--repeat", str(args.repeat)], cwd=str(checkout), check=True, timeout=3600)
    print(f"=== after: {ROOT} ===", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--db", type=Path, help="SQLite file: kept, and reused when it exists")
    parser.add_argument("--database-url", help="another database (PostgreSQL), reused when it holds the campaign")
    parser.add_argument("--baseline", type=Path, help="a checkout measured first on the same SQLite database")
    args = parser.parse_args()

    from starlette.testclient import TestClient

    from app.main import create_app
    from app.services import calibration
    from app.services.auth import create_token
    from app.store import calibration as store
    from model import calibration as cal

    with tempfile.TemporaryDirectory() as tmp:
        path = args.db or Path(tmp) / "bench.db"
        url = args.database_url or f"sqlite:///{path}"
        if not _exists(url):
            _build(url, args.shots)
        if args.baseline is not None:
            if args.database_url:
                raise SystemExit("--baseline measures a SQLite file (--db)")
            _baseline(args.baseline.resolve(), path, args)
        app = create_app(Settings(database_url=url, migrate_on_start=False))
        with TestClient(app) as client:
            factory = app.state.session_factory
            with factory() as session:
                token = create_token(session, "viewer", "bench", actor="bench")
            print(f"{'part':58s} {'wall s':>8s} {'cpu s':>8s}")

            def whole():
                with factory() as session:
                    return calibration.calibration_answer(session, SLUG)

            wall, cpu, answer = _timed(whole, args.repeat)
            verdict = "yes" if cpu < TARGET_SECONDS else "NO"
            print(f"{'calibration answer (service, in-process)':58s} {wall:8.3f} {cpu:8.3f}  {verdict}")

            def read():
                with factory() as session:
                    campaign = calibration.require_campaign(session, SLUG)
                    return store.read_shots(
                        session,
                        campaign.id,
                        None,
                        None,
                        inputs=calibration.SHOT_INPUTS,
                        settings_version=campaign.settings_version,
                        model_version=calibration.model.MODEL_VERSION,
                        run_tag_paths=calibration.RUN_TAG_PATHS,
                    )

            wall, cpu, shots = _timed(read, args.repeat)
            print(f"{'  read every shot (store.read_shots, run tags in SQL)':58s} {wall:8.3f} {cpu:8.3f}")
            n = len(shots.shot_id)
            with_phase = np.flatnonzero(np.isfinite(shots.values["measured.modulation_phase_rad"]))
            outcomes = {**shots.values, "efolds_exit": shots.values["efolds_exit"]}
            picks = [cal.driver_sample(outcomes[name]) for name in calibration.DRIVER_OUTCOMES]
            phase_sample = with_phase[calibration.derivative_sample(with_phase.size)]
            sample = np.unique(np.concatenate([phase_sample, *picks]))  # what measure reads for these shots

            def inputs():
                with factory() as session:
                    return store.read_inputs(session, shots.pk[sample])

            wall, cpu, columns = _timed(inputs, args.repeat)
            print(f"{f'  every input of {sample.size:,} shots (store.read_inputs)':58s} {wall:8.3f} {cpu:8.3f}")
            wall, cpu, _ = _timed(lambda: calibration.run_groups(shots.run_tags), args.repeat)
            print(f"{'  runs from the run tags (calibration.run_groups)':58s} {wall:8.3f} {cpu:8.3f}")
            wall, cpu, all_inputs = _timed(lambda: _all_inputs(factory, shots.pk), 1)
            wall_m, cpu_m, ratios = _timed(lambda: cal.density_scale_ratios(all_inputs, {}), args.repeat)
            print(f"{'  (not needed here) every input of every shot':58s} {wall:8.3f} {cpu:8.3f}")
            print(f"{'  (not needed here) c_i by the model at density_scale 1':58s} {wall_m:8.3f} {cpu_m:8.3f}")
            wall, cpu, _ = _timed(lambda: (cal.scale_interval(ratios), cal.scale_changes(ratios)), args.repeat)
            print(f"{'  scale interval and changes':58s} {wall:8.3f} {cpu:8.3f}")
            runs, _paths = calibration.run_groups(shots.run_tags)
            wall, cpu, _ = _timed(lambda: cal.segment_medians(ratios, runs), args.repeat)
            print(f"{f'  per-run series ({len(runs):,} runs)':58s} {wall:8.3f} {cpu:8.3f}")
            outcome = shots.values["measured.halo_radius_mm"]
            full = calibration._spread(columns, sample, n)
            driver_inputs = {p: full[p] for p in calibration.DRIVER_INPUTS}
            wall, cpu, _ = _timed(lambda: cal.rank_drivers(outcome, driver_inputs), args.repeat)
            print(f"{'  drivers of one outcome (of 6)':58s} {wall:8.3f} {cpu:8.3f}")
            headers = {"Authorization": f"Bearer {token}"}
            wall, cpu, response = _timed(
                lambda: client.get(f"/api/v1/campaigns/{SLUG}/calibration", headers=headers), args.repeat
            )
            print(
                f"{f'GET /api/v1/campaigns/{SLUG}/calibration':58s} {wall:8.3f} {cpu:8.3f}  "
                f"{len(response.content):,d} bytes"
            )
            scale = answer["density_scale"]
            print(
                f"\nshots {answer['shots']:,}; scale {scale['estimate']:.5f} [{scale['low']:.5f}, {scale['high']:.5f}] "
                f"({scale['interval_method']}); {len(answer['series'])} days, {len(answer['run_series'])} runs "
                f"by {', '.join(answer['run_series_by']) or '-'}; changes at "
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
            print(f"target: under {TARGET_SECONDS} s (CPU) for the whole answer")


def _all_inputs(factory, pks: np.ndarray) -> dict[str, np.ndarray]:
    from app.store import calibration as store

    with factory() as session:
        return store.read_inputs(session, pks)


if __name__ == "__main__":
    main()
