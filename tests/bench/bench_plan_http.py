"""Benchmark of the planner over HTTP: prints figures, asserts nothing (not collected by pytest).

Run:  .venv/bin/python tests/bench/bench_plan_http.py [--repeats 5] [--repo CHECKOUT]

The server is a real uvicorn in its own process (served.Served) on a temporary SQLite
database holding one campaign and worked example 1 as a stored shot. Figures (targets of issue 13):
- a 200 x 200 scan, POST /api/v1/plans/scan (density on a log axis x seed position on a linear axis around
  example 1, an invented shot: saturated and unsaturated, strong and weak seeds): with every output (the
  default, ~25 MB of JSON), with every output in the opt-in output_encoding float64_base64 (~16 MB), with the
  one output a map draws, and with none (statuses and flags only), the base given inline and as the stored
  shot; time from sending the request to the whole answer received (not decoded), by two clients that read
  the whole body: httpx (a typical Python client, with CPU of its own per MB) and the standard library's
  http.client (urllib's engine, little CPU of its own); the mean CPU time per answer
  of the server (read from /proc in clock ticks: 10 ms steps) and of the client; the answers decoded and
  checked against the floor;
- the floor: evaluate_table on the same 40,000 shots given as ready-made columns, in this process, run just
  before each request (the load of a shared machine changes from one second to the next): the best of each
  and the median of the repeats' ratios; target: the scan over HTTP within 1 s and within 4x the floor; and,
  in this process, where the time of the answer with every output goes (the model, writing the JSON);
- the planner page's map feed at the page's 80 x 80 and at 200 x 200 (figure built, text labels);
- windows for every field of a base, POST /api/v1/plans/window (target < 1 s): the default set (positive
  inputs) and every field with a window (positive and linear), on examples 1 and 2, checked against
  model.plan.nominal_windows.
Wall and CPU time are both printed: on a shared 2-core machine other work inflates wall time.
--repo serves another checkout (its .venv) for "before" figures; the floor and the in-process parts are
this checkout's.
"""

from __future__ import annotations

import argparse
import base64
import copy
import json
import math
import os
import sys
import tempfile
import time
from collections.abc import Callable
from http.client import HTTPConnection
from pathlib import Path
from typing import Any

import numpy as np
import orjson

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import httpx  # noqa: E402
from served import Served, repo_argument  # noqa: E402
from served import cpu_seconds as process_cpu_seconds  # noqa: E402

from app.database import make_engine, make_session_factory, upgrade_database  # noqa: E402
from app.schemas import CampaignCreate  # noqa: E402
from app.services.auth import create_token  # noqa: E402
from app.services.campaigns import create_campaign  # noqa: E402
from app.services.ingest import ingest_shots  # noqa: E402
from app.services.planner import answers  # noqa: E402
from model import STATUSES, evaluate_table, nominal_windows  # noqa: E402
from model.plan import LINEAR_SPANS, plan_base, positive_fields_set  # noqa: E402

CASES = json.loads((ROOT / "tests" / "data" / "reference_cases.json").read_text())
EX1, EX2 = CASES[0]["input"], CASES[1]["input"]
SLUG = "bench-plan"
TARGET_S = 1.0
TARGET_RATIO = 4.0


def timed(repeats: int, pid: int, fn: Callable[[], Any]) -> tuple[float, float, Any]:
    """(best wall s, server CPU s of that run, result)."""
    best, cpu, result = float("inf"), 0.0, None
    for _ in range(repeats):
        cpu0 = process_cpu_seconds(pid)
        wall0 = time.perf_counter()
        result = fn()
        wall = time.perf_counter() - wall0
        if wall < best:
            best, cpu = wall, process_cpu_seconds(pid) - cpu0
    return best, cpu, result


def show(label: str, wall: float, cpu: float, extra: str = "") -> None:
    print(f"{label:<64s} {wall * 1e3:8.1f} ms wall {cpu * 1e3:8.1f} ms server CPU  {extra}")


def floor_columns(axes: list[dict[str, Any]]) -> dict[str, np.ndarray]:
    base = plan_base(EX1)
    density = np.geomspace(axes[0]["start"], axes[0]["stop"], axes[0]["steps"])
    position = np.linspace(axes[1]["start"], axes[1]["stop"], axes[1]["steps"])
    n = density.size * position.size
    columns = {path: np.repeat(values, n) for path, values in base.columns.items()}
    columns["plasma.density_cm3"] = np.repeat(density, position.size)
    columns["seed.position_mm"] = np.tile(position, density.size)
    return columns


def check_scan(answer: dict[str, Any], floor: dict[str, np.ndarray]) -> bool:
    status = np.array(STATUSES, dtype=object)[floor["status"]].tolist()
    if answer["status"] != status or answer["shape"] != [200, 200]:
        return False
    for name, values in answer["outputs"].items():
        if isinstance(values, str):  # output_encoding float64_base64
            got = np.frombuffer(base64.b64decode(values), dtype="<f8")
        else:
            got = np.array([np.nan if v is None else v for v in values])
        if not np.array_equal(got, floor[name], equal_nan=True):
            return False
    return True


def check_windows(answer: dict[str, Any], shot: dict[str, Any], fields: list[str] | None) -> bool:
    expected = nominal_windows(shot, fields)
    return [(w["field"], w["low"], w["high"]) for w in answer["windows"]] == [
        (w.field, w.low, w.high) for w in expected.windows
    ]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    repo_argument(parser)
    args = parser.parse_args()
    r = args.repeats
    print(f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores (best of {r})")

    sigma_z = EX1["driver"]["sigma_z_mm"]
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 3e15, "steps": 200, "spacing": "log"},
        {"field": "seed.position_mm", "start": -2 * sigma_z, "stop": 2 * sigma_z, "steps": 200, "spacing": "linear"},
    ]
    columns = floor_columns(axes)
    evaluate_table(columns)  # warm-up
    floor_box: dict[str, Any] = {}

    def floor() -> tuple[float, float]:
        """One run of the floor: (wall s, CPU s)."""
        wall0, cpu0 = time.perf_counter(), time.process_time()
        floor_box["table"] = evaluate_table(columns)
        return time.perf_counter() - wall0, time.process_time() - cpu0

    def beside_the_floor(pid: int, fn: Callable[[], Any]) -> tuple[dict[str, float], Any]:
        """Each repeat runs the floor, then fn (the load of a shared machine changes from one second to the next):
        best and median walls of both, the median of the repeats' ratios, mean CPU of the server, this process
        (the client) and the floor."""
        rows = []
        for _ in range(r):
            floor_wall, floor_cpu = floor()
            cpu0, own0, wall0 = process_cpu_seconds(pid), time.process_time(), time.perf_counter()
            result = fn()
            wall, own, cpu = time.perf_counter() - wall0, time.process_time() - own0, process_cpu_seconds(pid) - cpu0
            rows.append((wall, floor_wall, wall / floor_wall, cpu, own, floor_cpu))
        a = np.array(rows)
        figures = {
            "best": a[:, 0].min(),
            "median": float(np.median(a[:, 0])),
            "floor best": a[:, 1].min(),
            "floor median": float(np.median(a[:, 1])),
            "median ratio": float(np.median(a[:, 2])),
            "server CPU": a[:, 3].mean(),
            "client CPU": a[:, 4].mean(),
            "floor CPU": a[:, 5].mean(),
        }
        return figures, result

    # Where the time of the answer with every output goes, in this process: the model, the JSON.
    planned = answers.given_base(EX1)
    parts = dict.fromkeys(("model.plan.scan", "the answer's JSON (answers.scan_answer)"), math.inf)
    for _ in range(r):
        t0 = time.perf_counter()
        result = answers.scan(planned, axes)
        t1 = time.perf_counter()
        size = sum(len(piece) for piece in answers.scan_answer(planned, result))
        t2 = time.perf_counter()
        for key, seconds in zip(parts, (t1 - t0, t2 - t1), strict=True):
            parts[key] = min(parts[key], seconds)
    floor_wall = min(floor()[0] for _ in range(r))
    print(
        f"in-process, every output: floor {floor_wall * 1e3:.1f} ms; "
        + "; ".join(f"{k} {v * 1e3:.1f} ms" for k, v in parts.items())
        + f" ({size / 1e6:.1f} MB)"
    )

    with tempfile.TemporaryDirectory(prefix="wakeledger-bench-plan-") as tmp:
        url = f"sqlite:///{tmp}/bench.db"
        upgrade_database(url)
        engine = make_engine(url)
        factory = make_session_factory(engine)
        with factory() as session:
            token = create_token(session, "viewer", "bench", actor="bench")
            create_campaign(session, CampaignCreate(slug=SLUG, name="Planner bench"), "bench")
            stored = copy.deepcopy(EX1) | {"taken_at": "2026-11-17T09:00:00Z"}
            ingest_shots(session, SLUG, [stored], "bench", batch=False)
        engine.dispose()

        served = Served(args.repo.resolve(), url)
        served.start()
        assert served.server is not None
        proc, base_url = served.server, served.base
        stdlib = HTTPConnection("127.0.0.1", served.port, timeout=120)  # connects on the first request
        try:
            headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
            with httpx.Client(base_url=base_url, headers=headers, timeout=120) as http:

                def post(path: str, body: dict[str, Any]) -> bytes:
                    response = http.post(path, content=orjson.dumps(body))
                    if response.status_code != 200:
                        raise SystemExit(f"{path}: {response.status_code} {response.text[:400]}")
                    return response.content

                def post_stdlib(path: str, body: dict[str, Any]) -> bytes:
                    stdlib.request("POST", path, body=orjson.dumps(body), headers=headers)
                    response = stdlib.getresponse()
                    content = response.read()
                    if response.status != 200:
                        raise SystemExit(f"{path}: {response.status} {content[:400]!r}")
                    return content

                stored_ref = {"campaign": SLUG, "shot_id": EX1["shot_id"]}
                post("/api/v1/plans/scan", {"base": EX1, "axes": axes})  # warm-up
                compact = {"output_encoding": "float64_base64"}
                served_compact = http.post("/api/v1/plans/scan", json={"base": EX1, "axes": axes} | compact)
                for label, base, extra in (
                    ("every output (default), base inline", EX1, {}),
                    ("every output (default), base a stored shot", stored_ref, {}),
                    ("every output, opt-in output_encoding float64_base64", EX1, compact),
                    ("one output (efolds_exit, as a map draws it)", EX1, {"outputs": ["efolds_exit"]}),
                    ("statuses and flags only (outputs [])", EX1, {"outputs": []}),
                ):
                    if extra is compact and served_compact.status_code != 200:
                        print(f"scan 200 x 200 over HTTP, {label}: not served by this checkout")
                        continue
                    body = {"base": base, "axes": axes} | extra
                    for client, send in (("httpx", post), ("http.client", post_stdlib)):
                        stdlib.close()  # reconnects: the server drops a connection idle for 5 s
                        f, content = beside_the_floor(
                            proc.pid, lambda body=body, send=send: send("/api/v1/plans/scan", body)
                        )
                        ok = check_scan(orjson.loads(content), floor_box["table"])
                        print(
                            f"scan 200 x 200 over HTTP, {label}, {client}: {f['best'] * 1e3:.1f} ms wall "
                            f"(median {f['median'] * 1e3:.1f}), floor beside it {f['floor best'] * 1e3:.1f} ms "
                            f"(median {f['floor median'] * 1e3:.1f}); ratio {f['best'] / f['floor best']:.1f}x "
                            f"of the bests, {f['median ratio']:.1f}x the median of the repeats; CPU per answer: "
                            f"server {f['server CPU'] * 1e3:.0f} ms, client {f['client CPU'] * 1e3:.0f} ms "
                            f"(floor {f['floor CPU'] * 1e3:.1f} ms: server {f['server CPU'] / f['floor CPU']:.1f}x); "
                            f"{len(content) / 1e6:.2f} MB; equal to the floor: {ok}"
                        )
                print(f"targets: within {TARGET_S:g} s and within {TARGET_RATIO:g}x the floor")

                for steps in (80, 200):
                    page_axes = [dict(axes[0], steps=steps), dict(axes[1], steps=steps)]
                    body = {"base": {"shot_id": EX1["shot_id"]}, "axes": page_axes, "contour": "efolds_exit"}
                    path = f"/campaigns/{SLUG}/plan/map"
                    wall, cpu, content = timed(r, proc.pid, lambda body=body, path=path: post(path, body))
                    show(
                        f"page map feed {steps} x {steps} (figure, labels, contours)",
                        wall,
                        cpu,
                        f"{len(content) / 1e6:.2f} MB",
                    )

                for name, shot in (("ex-1", EX1), ("ex-2", EX2)):
                    planned = plan_base(shot)
                    default = positive_fields_set(shot)
                    every = default + [p for p in LINEAR_SPANS if planned.value(p) == planned.value(p)]
                    for label, fields in (("positive fields (default)", None), ("every field with a window", every)):
                        body = {"base": shot} | ({} if fields is None else {"fields": fields})
                        wall, cpu, content = timed(r, proc.pid, lambda body=body: post("/api/v1/plans/window", body))
                        answer = orjson.loads(content)
                        count = len(answer["windows"])
                        ok = check_windows(answer, shot, fields)
                        show(f"windows {name} over HTTP: {label} ({count})", wall, cpu, f"equal to the model: {ok}")
                print(f"target: windows within {TARGET_S:g} s")
        finally:
            stdlib.close()
            served.stop()
    print(f"load average at the end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
