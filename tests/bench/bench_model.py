"""Benchmark of the closed-form model: prints throughput figures (not collected by pytest).

Run:  .venv/bin/python tests/bench/bench_model.py [--sizes 100000 1000000] [--loop 2000]
Figures: evaluate_table shots/s on generated (invented) shots of mixed species and seed
methods, evaluate_shot loop rate, and the speed-up of the table over the loop.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from model import evaluate_shot, evaluate_table  # noqa: E402


def generated_columns(n: int, seed: int = 1) -> dict[str, np.ndarray]:
    """Invented shots, vectorised: protons and ions, all three seed methods, a third measured."""
    rng = np.random.default_rng(seed)
    sigma_z = rng.uniform(20, 120, n)
    species = np.where(rng.random(n) < 0.9, "proton", "ion")
    method = np.array(["ionization_front", "electron_bunch", "none"])[rng.integers(0, 3, n)]
    return {
        "driver.species": species,
        "driver.mass_amu": np.where(species == "ion", 207.2, np.nan),
        "driver.charge_state": np.where(species == "ion", 30.0, np.nan),
        "driver.momentum_gev": rng.uniform(100, 500, n),
        "driver.population": 10 ** rng.uniform(10.5, 11.7, n),
        "driver.sigma_z_mm": sigma_z,
        "driver.sigma_r_mm": rng.uniform(0.1, 0.5, n),
        "driver.emittance_n_mm_mrad": rng.uniform(1, 4, n),
        "driver.offset_x_mm": rng.normal(0, 0.03, n),
        "driver.offset_y_mm": rng.normal(0, 0.03, n),
        "driver.angle_x_mrad": rng.normal(0, 0.01, n),
        "driver.angle_y_mrad": rng.normal(0, 0.01, n),
        "plasma.density_cm3": 10 ** rng.uniform(14, 15.5, n),
        "plasma.gradient_pct_per_m": rng.normal(0, 0.3, n),
        "plasma.length_m": rng.uniform(4, 12, n),
        "plasma.ion_mass_amu": np.full(n, 85.47),
        "plasma.ion_charge": np.ones(n),
        "seed.method": method,
        "seed.position_mm": np.where(method == "none", np.nan, rng.uniform(-1, 1, n) * sigma_z),
        "seed.electron_charge_pc": np.where(method == "electron_bunch", rng.uniform(50, 500, n), np.nan),
        "seed.electron_sigma_z_mm": np.where(method == "electron_bunch", rng.uniform(0.1, 0.6, n), np.nan),
        "seed.electron_sigma_r_mm": np.where(method == "electron_bunch", rng.uniform(0.1, 0.4, n), np.nan),
        "measured.modulation_freq_ghz": np.where(rng.random(n) < 0.3, rng.uniform(90, 560, n), np.nan),
    }


def row_as_shot(columns: dict[str, np.ndarray], i: int) -> dict:
    shot: dict = {}
    for path, values in columns.items():
        value = values[i]
        if isinstance(value, str) or not np.isnan(value):
            section, name = path.split(".")
            shot.setdefault(section, {})[name] = value.item() if hasattr(value, "item") else value
    return shot


def best_of(repeats: int, fn) -> float:
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--loop", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()

    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (figures are best of {args.repeats})")
    evaluate_table(generated_columns(1000))  # warm-up
    table_rate = 0.0
    for n in args.sizes:
        columns = generated_columns(n)
        seconds = best_of(args.repeats, lambda: evaluate_table(columns))
        table_rate = n / seconds
        print(f"evaluate_table  {n:>9,d} shots: {seconds:8.3f} s  -> {table_rate:12,.0f} shots/s")

    columns = generated_columns(args.loop, seed=2)
    shots = [row_as_shot(columns, i) for i in range(args.loop)]
    seconds = best_of(args.repeats, lambda: [evaluate_shot(s) for s in shots])
    loop_rate = args.loop / seconds
    print(f"evaluate_shot loop {args.loop:>6,d} shots: {seconds:8.3f} s  -> {loop_rate:12,.0f} shots/s")
    print(f"speed-up of evaluate_table ({args.sizes[-1]:,d}) over the loop: {table_rate / loop_rate:,.0f}x")


if __name__ == "__main__":
    main()
