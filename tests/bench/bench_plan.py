"""Benchmark of the planner (model.plan): prints figures, asserts nothing (not collected by pytest).

Run:  .venv/bin/python tests/bench/bench_plan.py [--repeats 5]
Figures (targets of issue 13):
- a 200 x 200 scan (density on a log axis x seed position on a linear axis around worked example ex-1, an
  invented shot: saturated and unsaturated, strong and weak seeds, every status) against the floor,
  evaluate_table on the same 40,000 shots given as ready-made columns (results checked equal);
  target: the scan within 4x of the floor;
- the scan answer encoded as the API's JSON by the service (its pieces joined: statuses and severities from
  their ranks, each output by orjson from its array, NaN as null), the part of the HTTP answer that the model
  does not do (over HTTP: tests/bench/bench_plan_http.py);
- windows for every field of a base (target < 1 s): the default set (positive inputs) and every field with a
  window (positive and linear), on ex-1 and ex-2;
- the nearest nominal shot varying 1-4 fields, the sensitivity table, and the per-shot phase derivatives of
  the jitter budget on 10,000 shots (for the dashboard).
Wall and CPU time are both printed: on a shared 2-core machine other work inflates wall time.
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from app.services.planner.answers import given_base, scan_answer  # noqa: E402
from model import (  # noqa: E402
    FLAG_CODES,
    STATUSES,
    evaluate_table,
    nearest_nominal,
    nominal_windows,
    plan_sensitivities,
    scan,
    wake_phase_derivatives,
)
from model.plan import LINEAR_SPANS, plan_base, positive_fields_set  # noqa: E402

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
EX1, EX2 = CASES[0]["input"], CASES[1]["input"]


def timed(repeats: int, fn: Callable[[], Any]) -> tuple[float, float, Any]:
    """(best wall s, CPU s of that run, result)."""
    best, cpu, result = float("inf"), 0.0, None
    for _ in range(repeats):
        wall0, cpu0 = time.perf_counter(), time.process_time()
        result = fn()
        wall = time.perf_counter() - wall0
        if wall < best:
            best, cpu = wall, time.process_time() - cpu0
    return best, cpu, result


def show(label: str, wall: float, cpu: float, extra: str = "") -> None:
    print(f"{label:<58s} {wall * 1e3:9.1f} ms wall {cpu * 1e3:9.1f} ms CPU {extra}")


def scan_answer_json(result: Any) -> bytes:
    """The POST /plans/scan body as the service writes it (app.services.planner.answers.scan_answer), joined."""
    return b"".join(scan_answer(given_base(EX1), result))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    r = args.repeats
    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (best of {r})")

    sigma_z = EX1["driver"]["sigma_z_mm"]
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 3e15, "steps": 200, "spacing": "log"},
        {"field": "seed.position_mm", "start": -2 * sigma_z, "stop": 2 * sigma_z, "steps": 200, "spacing": "linear"},
    ]
    scan(EX1, axes)  # warm-up
    scan_wall, scan_cpu, result = timed(r, lambda: scan(EX1, axes))

    base = plan_base(EX1)
    n = 200 * 200
    columns = {path: np.repeat(values, n) for path, values in base.columns.items()}
    columns["plasma.density_cm3"] = np.repeat(result.axes[0].values, 200)
    columns["seed.position_mm"] = np.tile(result.axes[1].values, 200)
    floor_wall, floor_cpu, floor = timed(r, lambda: evaluate_table(columns))
    same = np.array_equal(floor["status"], result.status) and all(
        np.array_equal(floor[name], values, equal_nan=True) for name, values in result.outputs.items()
    )
    counts = ", ".join(f"{s} {int((result.status == i).sum()):,d}" for i, s in enumerate(STATUSES))
    print(f"scan 200 x 200 = {n:,d} points ({counts}); equal to the floor: {same}")
    show("scan (model.plan.scan)", scan_wall, scan_cpu)
    show("floor: evaluate_table on the same 40,000 shots", floor_wall, floor_cpu)
    print(f"ratio scan / floor: {scan_wall / floor_wall:.2f}x wall, {scan_cpu / floor_cpu:.2f}x CPU (target <= 4x)")
    json_wall, json_cpu, body = timed(r, lambda: scan_answer_json(result))
    show("scan answer as JSON (its pieces joined)", json_wall, json_cpu, f"{len(body) / 1e6:.1f} MB")
    print(f"model + JSON for the HTTP answer: {(scan_wall + json_wall) * 1e3:.1f} ms (target < 1 s with the service)")

    for name, shot in (("ex-1", EX1), ("ex-2", EX2)):
        default = positive_fields_set(shot)
        every = default + [p for p in LINEAR_SPANS if plan_base(shot).value(p) == plan_base(shot).value(p)]
        wall, cpu, windows = timed(r, lambda shot=shot: nominal_windows(shot))
        found = sum(w.found for w in windows.windows)
        show(f"windows {name}: {len(default)} positive fields ({found} found)", wall, cpu)
        wall, cpu, windows = timed(r, lambda shot=shot, every=every: nominal_windows(shot, every))
        show(f"windows {name}: every field with a window ({len(every)})", wall, cpu)

    off_axis = copy.deepcopy(EX1)
    off_axis["driver"]["offset_x_mm"] = 0.3  # HOSING_RISK: not nominal
    vary = ["plasma.density_cm3", "driver.population", "driver.sigma_r_mm", "plasma.length_m"]
    for d in range(1, 5):
        wall, cpu, nearest = timed(max(1, r // 2), lambda d=d: nearest_nominal(off_axis, vary[:d]))
        distance = f"distance {nearest.distance:.4f}" if nearest.found else "none in the span"
        show(f"nearest nominal, {d} field(s) varied", wall, cpu, distance)

    wall, cpu, rows = timed(r, lambda: plan_sensitivities(EX1))
    show(f"sensitivity table ex-1 ({len(rows)} rows)", wall, cpu)
    many = {path: np.repeat(values, 10_000) for path, values in base.columns.items()}
    rng = np.random.default_rng(5)
    many["plasma.density_cm3"] = many["plasma.density_cm3"] * rng.uniform(0.5, 2.0, 10_000)
    many["driver.population"] = many["driver.population"] * rng.uniform(0.5, 2.0, 10_000)
    wall, cpu, derivatives = timed(r, lambda: wake_phase_derivatives(many))
    finite = int(np.isfinite(derivatives["plasma.density_cm3"]).sum())
    show("phase derivatives, 4 sources x 10,000 shots (90,000 rows)", wall, cpu, f"{finite:,d} finite")
    print(f"flag codes in the scan: {len(FLAG_CODES)}")


if __name__ == "__main__":
    main()
