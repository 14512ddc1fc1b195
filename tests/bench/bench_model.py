"""Benchmark of the closed-form model core: prints figures, asserts nothing (not collected by pytest).

    .venv/bin/python tests/bench/bench_model.py [--shots 200000] [--loop 2000] [--repeats 5]
        [--baseline /path/to/checkout-before-this-round]

What it measures, on the same invented shots throughout (all species, all three seed methods,
gradients, a third with a measured frequency, slow drivers and small-N corners: fronts far
ahead of the centre, electron seeds far behind it):
- evaluate_table on --shots shots: shots/s from the best of --repeats runs, wall and CPU time; the same with every
  column of the table built and read (dict(table): the flag values and limits are built when first read), and
  with the two text columns as Python objects, as the ingest path builds them from JSON;
- a loop of evaluate_shot over the first --loop of those shots: shots/s and the table's speed-up;
- that the table and the loop agree on those shots (every output, status and flag; it stops if not);
- with --baseline, evaluate_table of that checkout (its own .venv and its own model) on the same
  shots, measured in turn with ours (--rounds), and the ratio of today's figure to it.
Targets (issue 16): >= 2e6 shots/s, >= 100x. The machine is shared: quote figures from a quiet spell.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Mapping
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve()
ION_DRIVERS = ((207.2, 82), (207.2, 54), (238.03, 92), (131.29, 54), (39.948, 18), (4.0026, 2))
PLASMA_IONS = ((1.008, 1.0), (4.0026, 1.0), (39.948, 1.0), (85.47, 1.0), (132.9, 1.0), (39.948, 2.0))


def varied_columns(n: int, seed: int = 20261201) -> dict[str, np.ndarray]:
    """n invented shots as evaluate_table columns (demo data: no real machine's parameters)."""
    from model.plasma import plasma_frequency

    rng = np.random.default_rng(seed)

    def log_uniform(low: float, high: float, size: int = n) -> np.ndarray:
        return 10.0 ** rng.uniform(math.log10(low), math.log10(high), size)

    kind = rng.choice(4, n, p=[0.70, 0.08, 0.07, 0.15])  # proton, electron, positron, ion
    species = np.array(["proton", "electron", "positron", "ion"])[kind]
    ion = kind == 3
    lepton = (kind == 1) | (kind == 2)
    driver_ion = rng.integers(0, len(ION_DRIVERS), n)
    momentum = np.where(lepton, log_uniform(0.05, 50.0), log_uniform(20.0, 1000.0))
    momentum = np.where(ion, log_uniform(200.0, 20000.0), momentum)
    slow = rng.random(n) < 0.04  # slow drivers: gamma below 10 (rule SLOW_DRIVER)
    momentum = np.where(slow, log_uniform(0.02, 8.0), momentum)
    sigma_z = np.where(lepton & (rng.random(n) < 0.5), log_uniform(0.01, 2.0), log_uniform(1.0, 150.0))
    population = np.where(ion, log_uniform(1e7, 1e10), log_uniform(1e9, 5e11))
    method_code = rng.choice(3, n, p=[0.45, 0.30, 0.25])  # ionization_front, electron_bunch, none
    method = np.array(["ionization_front", "electron_bunch", "none"])[method_code]
    position = rng.uniform(-2.0, 2.0, n) * sigma_z
    corner = rng.random(n) < 0.08  # weak coupling behind a far front, or a seed far behind the centre
    far = np.where(method_code == 0, rng.uniform(3.0, 9.5, n), rng.uniform(-9.5, -3.0, n))
    position = np.where(corner, far * sigma_z, position)
    length = rng.uniform(1.0, 20.0, n)
    gradient = np.where(rng.random(n) < 0.4, 0.0, rng.normal(0.0, 0.6, n))
    gradient = np.maximum(gradient, -90.0 / length)  # the density stays positive to the exit
    density = log_uniform(1e13, 3e16)
    plasma_ion = rng.integers(0, len(PLASMA_IONS), n)
    bunch = method_code == 1
    measured = rng.random(n) < 0.35
    # f_p [GHz] of the density a few metres in, read with a 1 % spread
    f_true = plasma_frequency(1e6 * density * (1.0 + 0.01 * gradient * rng.uniform(0.0, 5.0, n))) / 1e9
    return {
        "driver.species": species,
        "driver.mass_amu": np.where(ion, np.array([m for m, _ in ION_DRIVERS])[driver_ion], np.nan),
        "driver.charge_state": np.where(ion, np.array([q for _, q in ION_DRIVERS], dtype=float)[driver_ion], np.nan),
        "driver.momentum_gev": momentum,
        "driver.population": population,
        "driver.sigma_z_mm": sigma_z,
        "driver.sigma_r_mm": log_uniform(0.05, 1.0),
        "driver.emittance_n_mm_mrad": np.where(rng.random(n) < 0.1, 0.0, rng.uniform(0.5, 10.0, n)),
        "driver.offset_x_mm": rng.normal(0.0, 0.03, n),
        "driver.offset_y_mm": rng.normal(0.0, 0.03, n),
        "driver.angle_x_mrad": rng.normal(0.0, 0.01, n),
        "driver.angle_y_mrad": rng.normal(0.0, 0.01, n),
        "plasma.density_cm3": density,
        "plasma.gradient_pct_per_m": gradient,
        "plasma.length_m": length,
        "plasma.ion_mass_amu": np.array([m for m, _ in PLASMA_IONS])[plasma_ion],
        "plasma.ion_charge": np.array([q for _, q in PLASMA_IONS])[plasma_ion],
        "seed.method": method,
        "seed.position_mm": np.where(method_code == 2, np.nan, position),
        "seed.electron_charge_pc": np.where(bunch, log_uniform(10.0, 1000.0), np.nan),
        "seed.electron_sigma_z_mm": np.where(bunch, rng.uniform(0.05, 1.0, n), np.nan),
        "seed.electron_sigma_r_mm": np.where(bunch, rng.uniform(0.05, 0.5, n), np.nan),
        "measured.modulation_freq_ghz": np.where(measured, f_true * (1.0 + 0.01 * rng.standard_normal(n)), np.nan),
    }


def row_as_shot(columns: dict[str, np.ndarray], i: int) -> dict:
    """Row i as an API-shaped shot (absent cells left out)."""
    shot: dict = {}
    for path, values in columns.items():
        value = values[i].item()
        if isinstance(value, str) or not math.isnan(value):
            section, name = path.split(".")
            shot.setdefault(section, {})[name] = value
    return shot


def timed(repeats: int, fn: Callable[[], object]) -> tuple[float, float, object]:
    """(best wall s, best CPU s, last result) over repeats runs."""
    best_wall = best_cpu = math.inf
    result = None
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        result = fn()
        best_wall = min(best_wall, time.perf_counter() - wall)
        best_cpu = min(best_cpu, time.process_time() - cpu)
    return best_wall, best_cpu, result


def measure_table(columns: dict[str, np.ndarray], repeats: int, every_column: bool = False) -> tuple[float, float]:
    """(best wall s, best CPU s) of evaluate_table; with every_column, of building the table and all its columns."""
    from model import evaluate_table

    evaluate_table({k: v[:1000] for k, v in columns.items()})  # warm-up: imports, tables, caches
    if every_column:
        wall, cpu, _ = timed(repeats, lambda: dict(evaluate_table(columns)))
    else:
        wall, cpu, _ = timed(repeats, lambda: evaluate_table(columns))
    return wall, cpu


def with_text_as_objects(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The same columns with the two text columns as Python objects, as the ingest path builds them from JSON."""
    return {k: v.astype(object) if v.dtype.kind == "U" else v for k, v in columns.items()}


def check_table_equals_loop(table: Mapping[str, np.ndarray], shots: list[dict]) -> int:
    """Compare every output, status, flag rank, value and limit of the table's first rows with evaluate_shot;
    return the cells compared."""
    from model import FLAG_CODES, OUTPUT_NAMES, SEVERITY_BY_RANK, STATUSES, evaluate_shot

    checked = 0
    for i, shot in enumerate(shots):
        one = evaluate_shot(shot)
        for name in OUTPUT_NAMES:
            got, want = table[name][i], one[name]
            if not ((want is None and math.isnan(got)) or got == want):
                raise SystemExit(f"table and loop differ at row {i}, {name}: {got!r} != {want!r}")
        if STATUSES[table["status"][i]] != one["status"]:
            raise SystemExit(f"table and loop differ at row {i}: status")
        fired = {f["code"]: f for f in one["flags"]}
        for code in FLAG_CODES:
            flag = fired.get(code, {"severity": "", "value": None, "limit": None})
            if SEVERITY_BY_RANK[table[f"flag.{code}"][i]] != flag["severity"]:
                raise SystemExit(f"table and loop differ at row {i}: flag {code}")
            for key in ("value", "limit"):
                got, want = table[f"flag_{key}.{code}"][i], flag[key]
                if not ((want is None and math.isnan(got)) or got == want):
                    raise SystemExit(f"table and loop differ at row {i}: flag_{key}.{code} {got!r} != {want!r}")
        checked += len(OUTPUT_NAMES) + 1 + 3 * len(FLAG_CODES)
    return checked


def baseline_figure(checkout: Path, columns: dict[str, np.ndarray], repeats: int, variant: str) -> tuple[float, float]:
    """(best wall s, best CPU s) of evaluate_table in another checkout, its own venv and model, on the same shots."""
    venv = checkout / ".venv" / "bin"
    python = venv / "python" if (venv / "wakeledger").exists() else Path(sys.executable)  # an installed .venv
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "shots.npz"
        np.savez(data, **columns)
        worker = [
            str(python),
            str(HERE),
            "--measure-only",
            str(data),
            "--repo",
            str(checkout),
            "--repeats",
            str(repeats),
        ]
        done = subprocess.run(
            worker + {"plain": [], "every-column": ["--every-column"], "objects": ["--objects"]}[variant],
            check=True,
            capture_output=True,
            text=True,
        )
    figures = json.loads(done.stdout.strip().splitlines()[-1])
    return figures["wall_s"], figures["cpu_s"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=200_000)
    parser.add_argument("--loop", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--rounds", type=int, default=3, help="with --baseline: alternate the two this many times")
    parser.add_argument("--baseline", type=Path, help="a checkout of the code before this round, with its own .venv")
    parser.add_argument("--measure-only", type=Path, help=argparse.SUPPRESS)  # baseline worker: shots from this .npz
    parser.add_argument("--repo", type=Path, default=HERE.parents[2], help=argparse.SUPPRESS)
    parser.add_argument("--objects", action="store_true", help=argparse.SUPPRESS)  # worker: text columns as objects
    parser.add_argument("--every-column", action="store_true", help=argparse.SUPPRESS)  # worker: dict(table)
    args = parser.parse_args()
    sys.path.insert(0, str(args.repo))

    if args.measure_only:  # runs inside the baseline's interpreter; the str status arrays it returns are not read
        with np.load(args.measure_only) as data:
            columns = {k: data[k] for k in data.files}
        wall, cpu = measure_table(
            with_text_as_objects(columns) if args.objects else columns, args.repeats, args.every_column
        )
        print(json.dumps({"wall_s": wall, "cpu_s": cpu}))
        return

    from model import evaluate_shot, evaluate_table

    columns = varied_columns(args.shots)
    species, methods = (np.unique(columns[k], return_counts=True) for k in ("driver.species", "seed.method"))
    counts = [f"{name} {count:,d}" for name, count in [*zip(*species, strict=True), *zip(*methods, strict=True)]]
    print(f"{args.shots:,d} invented shots: " + ", ".join(counts))
    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores; best of {args.repeats} runs")
    table = evaluate_table(columns)
    efolds = table["efolds_exit"]
    saturated = np.mean(~np.isnan(table["saturation_length_m"]))
    print(
        f"  e-folds at the exit: {np.mean(efolds < 1):.1%} below 1, {np.mean(efolds > 60):.1%} above 60; "
        f"{saturated:.1%} saturated"
    )

    # With a baseline the two are measured in turn, so that both see the same spells of load.
    rounds = max(1, args.rounds) if args.baseline else 1
    as_objects = with_text_as_objects(columns)
    variants = ("plain", "every-column", "objects")
    ours: dict[str, list[tuple[float, float]]] = {v: [] for v in variants}
    theirs: dict[str, list[tuple[float, float]]] = {v: [] for v in variants}
    for _ in range(rounds):
        for variant in variants:
            shots_in = as_objects if variant == "objects" else columns
            ours[variant].append(measure_table(shots_in, args.repeats, variant == "every-column"))
            if args.baseline:
                theirs[variant].append(baseline_figure(args.baseline, columns, args.repeats, variant))
    best = {k: (min(w for w, _ in v), min(c for _, c in v)) for k, v in ours.items()}
    wall, cpu = best["plain"]
    rate = args.shots / wall
    print(
        f"evaluate_table  {args.shots:>9,d} shots: wall {wall:.4f} s, CPU {cpu:.4f} s -> {rate:12,.0f} shots/s "
        f"(CPU: {args.shots / cpu:,.0f} shots/s)"
    )
    every_wall, every_cpu = best["every-column"]
    print(
        f"  the same with every column built and read (dict(table)): wall {every_wall:.4f} s, CPU {every_cpu:.4f} s "
        f"-> {args.shots / every_wall:,.0f} shots/s"
    )
    object_wall = best["objects"][0]
    print(
        f"  the same with the text columns as objects (as ingest builds them): wall {object_wall:.4f} s "
        f"-> {args.shots / object_wall:,.0f} shots/s"
    )

    shots = [row_as_shot(columns, i) for i in range(args.loop)]
    loop_wall, loop_cpu, _ = timed(max(1, args.repeats // 2), lambda: [evaluate_shot(s) for s in shots])
    loop_rate = args.loop / loop_wall
    print(
        f"evaluate_shot loop {args.loop:>6,d} shots: wall {loop_wall:.4f} s, CPU {loop_cpu:.4f} s "
        f"-> {loop_rate:,.0f} shots/s"
    )
    cpu_speed_up = loop_cpu / args.loop * args.shots / cpu
    print(f"speed-up of evaluate_table over the loop: {rate / loop_rate:,.0f}x (CPU: {cpu_speed_up:,.0f}x)")
    cells = check_table_equals_loop(table, shots)
    print(
        f"table and loop agree on the first {args.loop:,d} shots "
        f"({cells:,d} outputs, statuses, flag ranks, values and limits compared)"
    )

    if args.baseline:
        base_wall, base_cpu = min(w for w, _ in theirs["plain"]), min(c for _, c in theirs["plain"])
        base_every_wall = min(w for w, _ in theirs["every-column"])
        base_object_wall = min(w for w, _ in theirs["objects"])
        print(
            f"before this round ({args.baseline}): wall {base_wall:.4f} s, CPU {base_cpu:.4f} s -> "
            f"{args.shots / base_wall:12,.0f} shots/s (best of {rounds} x {args.repeats}, alternating with ours)"
        )
        print(
            f"  the same with every column built and read: wall {base_every_wall:.4f} s "
            f"-> {args.shots / base_every_wall:,.0f} shots/s"
        )
        print(
            f"  the same with the text columns as objects: wall {base_object_wall:.4f} s "
            f"-> {args.shots / base_object_wall:,.0f} shots/s"
        )
        print(
            f"ratio to before this round: {base_wall / wall:.2f}x wall, {base_cpu / cpu:.2f}x CPU; "
            f"with every column {base_every_wall / every_wall:.2f}x wall; "
            f"with the text columns as objects {base_object_wall / object_wall:.2f}x wall"
        )


if __name__ == "__main__":
    main()
