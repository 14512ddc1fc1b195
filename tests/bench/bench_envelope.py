"""Benchmark: the envelope solver (MODEL.md section 10) on worked example ex-1 at 16 slices
per plasma wavelength with the default step, stopping 0.5 m past saturation as a detailed run
does by default (`--whole-plasma`: to the exit, as before). Target: under 0.5 s on one core.
Prints the figures (wall and CPU); asserts nothing.

    .venv/bin/python tests/bench/bench_envelope.py [--repeat 3] [--slices-per-wavelength 16] [--whole-plasma]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

# one core: keep any threaded BLAS to a single thread before numpy loads
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from model.envelope import envelope_result_to_json, simulate_envelope  # noqa: E402

TARGET_S = 0.5
CASES = ROOT / "tests" / "data" / "reference_cases.json"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--slices-per-wavelength", type=int, default=16)
    parser.add_argument("--whole-plasma", action="store_true", help="integrate to the exit (no stop past saturation)")
    args = parser.parse_args()
    stop = {"stop_after_saturation_m": None} if args.whole_plasma else {}
    shot = next(c["input"] for c in json.loads(CASES.read_text()) if c["input"]["shot_id"] == "ex-1")
    simulate_envelope(shot, slices_per_wavelength=args.slices_per_wavelength, **stop)  # warm caches and imports
    times, cpu = [], []
    for _ in range(max(1, args.repeat)):
        started, started_cpu = time.perf_counter(), time.process_time()
        result = simulate_envelope(shot, slices_per_wavelength=args.slices_per_wavelength, **stop)
        times.append(time.perf_counter() - started)
        cpu.append(time.process_time() - started_cpu)
    n = result["numerics"]
    best = min(times)
    slice_steps = n["slices"] * n["steps"]
    json_bytes = len(json.dumps(envelope_result_to_json(result)))
    print(
        f"ex-1: {n['slices']} slices x {n['steps']} steps (dz = {n['dz_m']:.4g} m), "
        f"{n['slices_per_wavelength']} slices per plasma wavelength"
    )
    print(f"wall time: best {best:.3f} s, runs {', '.join(f'{t:.3f}' for t in times)} s (target < {TARGET_S:g} s)")
    print(f"cpu time: best {min(cpu):.3f} s (the machine's load inflates wall time)")
    print(f"slice-steps per second: {slice_steps / best:.3g}")
    print(
        f"betatron phase per step: at most {n['max_betatron_phase_per_step_linear']:.3f} rad while delta < "
        f"delta_sat/10, {n['max_betatron_phase_per_step_to_saturation']:.3f} rad up to saturation "
        f"(the step criterion: model/envelope.py)"
    )
    print(f"stored: {len(result['z_m'])} z samples, JSON {json_bytes / 1e6:.2f} MB")
    print(
        f"result: saturation at {result['saturation_z_m']} m ({result['saturation_reason']}), "
        f"fitted e-folds {result['fitted_efolds']:.3f} vs closed form {result['closed_form_efolds_at_fit']:.3f}"
    )
    print(f"run ended at z = {result['z_steps_m'][-1]:.3g} m of {shot['plasma']['length_m']:g} m")
    print("within target" if best < TARGET_S else "OVER TARGET")


if __name__ == "__main__":
    main()
