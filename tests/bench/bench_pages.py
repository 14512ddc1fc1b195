"""Benchmark: the overview of a 100,000-shot campaign as a browser loads it (SQLite or PostgreSQL). Prints figures only.

Builds an invented campaign in a scratch SQLite database (inputs generated with numpy,
evaluated by model.evaluate_table in one call, rows bulk-inserted with SQLAlchemy Core
using the ingest service's evaluation_rows), serves it with a real ``wakeledger serve``
of the checkout given by ``--repo`` (this one by default: run it once with a checkout of
the code before a change for the "before" figures), and measures:

- a full read: the overview's first load (HTML and every feed) on a server started with its
  overview warm-up off, so nothing is cached: what a viewer pays after a settings change or a
  re-evaluation, and what the warm-up spends after a start (best of three starts; the round
  loads the HTML a second time, from memory, which the figure keeps);
- the server as started (warm-up on): the overview's HTML plus every feed the page loads (the
  three chart feeds and the default regime map), one after another, with the browser's
  Accept-Encoding; the server's CPU seconds for each, on the first round after start (after
  signing in, as a viewer would) and after; then the same round after each of a few new shots
  (posted through the API one at a time, as on shift: each moves the campaign's change marks);
- the steady live poll (``/live?since=<latest>``: nothing new), median of many;
- headless Chromium (/usr/bin/chromium), a fresh profile each time (a first visit):
  the time from navigation until every chart on the page is drawn, the page's main-thread
  time (script, layout, style), each chart's Plotly time (wakeledger.js measures each draw)
  with its markers and SVG elements, and the bytes transferred (every response as it came
  over the wire, plotly.min.js included); a shot's page (two small charts, the same Plotly)
  visited alternately gives the scale: on a loaded machine most of a first visit is
  Chromium compiling Plotly;
- the shot table and one shot's page, through the same server.

Targets of issue 16 goal 1: every chart drawn within 2.5 s, HTML + feeds under 0.5 s,
a first visit under 2 MB, the steady poll under 20 ms.

    .venv/bin/python tests/bench/bench_pages.py [--shots 100000] [--repeat 5] [--repo PATH]
        [--backend sqlite|postgresql] [--no-browser]
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from contextlib import closing
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from served import Served, cpu_seconds, repo_argument, scratch_database, worked_example  # noqa: E402

CHROMIUM = Path("/usr/bin/chromium")
TARGET_DRAWN_S = 2.5
TARGET_SERVER_S = 0.5
TARGET_FIRST_VISIT_BYTES = 2_000_000
TARGET_POLL_S = 0.020
ACCEPT_ENCODING = "gzip, deflate, br"


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
    """The campaign, with the importing checkout's own schema (app.database.upgrade_database)."""
    from sqlalchemy import insert, text

    import model
    from app.database import make_engine, upgrade_database
    from app.services.ingest.evaluation import evaluation_rows
    from app.tables import Campaign, Evaluation, Flag, Shot

    start = time.perf_counter()
    upgrade_database(url)
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
        if conn.dialect.name == "postgresql":  # the keys were given: move the sequences past them
            for table in ("campaigns", "shots"):
                conn.execute(
                    text(f"SELECT setval(pg_get_serial_sequence('{table}', 'id'), (SELECT max(id) FROM {table}))")
                )
    if engine.dialect.name == "postgresql":
        # The planner's statistics, as autovacuum gathers them within a minute of a bulk load on a
        # running database (the PostgreSQL here runs with autovacuum off).
        with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
            conn.execute(text("ANALYZE"))
    engine.dispose()
    return time.perf_counter() - start


def build_with(repo: Path, url: str, n: int) -> None:
    """Build the database with the served checkout's code (its venv, its schema)."""
    env = {**os.environ, "PYTHONPATH": str(repo)}
    t = time.perf_counter()
    subprocess.run(
        [str(repo / ".venv" / "bin" / "python"), __file__, "--build-only", "--url", url, "--shots", str(n)],
        env=env,
        check=True,
        cwd=str(repo),
        timeout=3600,
    )
    print(f"built {n:,} shots in {time.perf_counter() - t:.1f} s with {repo}")


def signed_in_client(base: str, token: str):
    import httpx

    client = httpx.Client(base_url=base, timeout=120, headers={"Accept-Encoding": ACCEPT_ENCODING})
    page = client.get("/sign-in")
    nonce = re.search(r'name="nonce" value="([^"]+)"', page.text)
    assert nonce is not None, "the sign-in form carries no nonce"
    r = client.post("/sign-in", data={"token": token, "nonce": nonce.group(1)}, follow_redirects=False)
    assert r.status_code == 303, r.status_code
    return client


def overview_feeds(html: str) -> list[str]:
    """Every feed the overview page loads: its chart feeds and the default regime map."""
    feeds = re.findall(r'data-feed="([^"]+)"', html)
    regime = re.search(r'<script type="application/json" id="regime-config">(.*?)</script>', html, re.S)
    if regime:
        cfg = json.loads(regime.group(1))
        feeds = [f for f in feeds if f != cfg["url"]]
        feeds.append(f"{cfg['url']}?x={cfg['x']}&y={cfg['y']}")
    return [f.replace("&amp;", "&") for f in feeds]


def timed_get(client, path: str) -> tuple[float, int, int]:
    """Seconds, bytes as sent (compressed if so) and the status of one GET."""
    t = time.perf_counter()
    with client.stream("GET", path) as r:
        raw = b"".join(r.iter_raw())
        status = r.status_code
    return time.perf_counter() - t, len(raw), status


def server_round(client, pid: int, feeds: list[str], rows: dict) -> tuple[float, float]:
    """The HTML and every feed once, one after another: wall seconds and the server's CPU seconds."""
    total, cpu = 0.0, cpu_seconds(pid)
    for path in ["/campaigns/bench", *feeds]:
        before = cpu_seconds(pid)
        s, size, status = timed_get(client, path)
        rows.setdefault(path, []).append((s, size, status, cpu_seconds(pid) - before))
        total += s
    return total, cpu_seconds(pid) - cpu


def server_figures(client, repeat: int, pid: int, ingest: str) -> None:
    """The first round is the first load after start (what the start-up warm-up left: its first HTML
    is timed too); the server's CPU seconds are steadier than wall time on a shared machine."""
    before = cpu_seconds(pid)
    s, _size, _status = timed_get(client, "/campaigns/bench")
    first_html = (s, cpu_seconds(pid) - before)
    html = client.get("/campaigns/bench").text
    feeds = overview_feeds(html)
    totals, cpus, rows = [], [], {}
    for _ in range(repeat):
        total, cpu = server_round(client, pid, feeds, rows)
        totals.append(total)
        cpus.append(cpu)
    totals[0] += first_html[0] - rows["/campaigns/bench"][0][0]  # the first round's HTML: the first load
    cpus[0] += first_html[1] - rows["/campaigns/bench"][0][3]
    rows["/campaigns/bench"][0] = (*rows["/campaigns/bench"][0][:3], first_html[1])
    print(f"\nserver: the overview's HTML and feeds one after another (wall: median of {repeat}; server CPU)")
    for path, results in rows.items():
        cold_cpu, warm_cpu = results[0][3], statistics.median(r[3] for r in results[1:]) if repeat > 1 else float("nan")
        print(
            f"  {path:66s} {statistics.median(r[0] for r in results):7.3f} s {results[-1][1]:10,d} B ({results[-1][2]})"
            f"  CPU first {cold_cpu:.2f} s, then {warm_cpu:.2f} s"
        )
    median = statistics.median(totals)
    print(
        f"  HTML + feeds: first load {totals[0]:.3f} s wall, {cpus[0]:.3f} s server CPU; "
        f"median {median:.3f} s wall, {statistics.median(cpus):.3f} s CPU (target < {TARGET_SERVER_S} s)"
    )
    after_shot(client, repeat, pid, feeds, ingest)

    html = client.get("/campaigns/bench").text  # after the new shots: the poll finds nothing new
    cursor = json.loads(re.search(r'id="live-config">(.*?)</script>', html, re.S).group(1))["cursor"]
    assert client.get(f"/campaigns/bench/live?since={cursor}").json()["shots"] == [], "the poll found new shots"
    polls = []
    count = max(30, repeat * 10)
    cpu = cpu_seconds(pid)
    for _ in range(count):
        s, _size, status = timed_get(client, f"/campaigns/bench/live?since={cursor}")
        assert status == 200, status
        polls.append(s)
    cpu_ms = (cpu_seconds(pid) - cpu) / count * 1000
    print(
        f"steady live poll (nothing new): median {statistics.median(polls) * 1000:.1f} ms wall, "
        f"max {max(polls) * 1000:.1f} ms, {cpu_ms:.1f} ms server CPU each (target < {TARGET_POLL_S * 1000:.0f} ms)"
    )


def after_shot(client, repeat: int, pid: int, feeds: list[str], ingest: str) -> None:
    """On shift: one new shot posted, then the overview loaded (the first viewer after the shot pays)."""
    rows: dict = {}
    totals, cpus = [], []
    for i in range(repeat):
        shot = {**worked_example(0), "shot_id": f"bench-new-{i}-{time.time_ns()}"}
        shot["taken_at"] = datetime.now(UTC).isoformat().replace("+00:00", "Z")
        r = client.post("/api/v1/campaigns/bench/shots", json=shot, headers={"Authorization": f"Bearer {ingest}"})
        assert r.status_code == 201, r.text
        total, cpu = server_round(client, pid, feeds, rows)
        totals.append(total)
        cpus.append(cpu)
    print(f"  after one new shot (median of {repeat} shots, each posted then the page loaded):")
    for path, results in rows.items():
        print(
            f"    {path:64s} {statistics.median(r[0] for r in results):7.3f} s  "
            f"CPU median {statistics.median(r[3] for r in results):.3f} s, max {max(r[3] for r in results):.3f} s"
        )
    print(
        f"    HTML + feeds: median {statistics.median(totals):.3f} s wall, {statistics.median(cpus):.3f} s server CPU; "
        f"max {max(cpus):.3f} s CPU (target < {TARGET_SERVER_S} s)"
    )


DRAWN = """() => {
  const charts = Array.from(document.querySelectorAll('.chart'));
  return charts.length > 0 && charts.every(c => c._fullLayout && c.querySelector('.main-svg')
    && !c.classList.contains('loading'));
}"""


# Per chart: how long Plotly took (wakeledger.js measures each draw), how many markers (one SVG
# path each), heatmap images and SVG elements it drew.
PER_CHART = """() => Array.from(document.querySelectorAll('.chart')).map(c => {
  const measures = performance.getEntriesByName('wakeledger draw ' + c.id);
  return {id: c.id, ms: measures.length ? measures[measures.length - 1].duration : null,
          markers: c.querySelectorAll('.scatterlayer .point').length,
          images: c.querySelectorAll('image').length,
          elements: c.querySelectorAll('svg *').length};
})"""


# For scale: a shot's page, two small charts and the same plotly.min.js, on a first visit too.
# On a loaded machine most of a first visit is Chromium parsing and compiling Plotly (3.5 MB).
SMALL_PAGE_DRAWN = """() => document.querySelectorAll('.chart .main-svg').length > 0"""


def _first_visit(chromium, base: str, cookie: tuple[str, str], path: str, drawn_when: str) -> dict:
    """One visit with a fresh profile: seconds until drawn, main-thread metrics, charts, bytes."""
    context = chromium.new_context(viewport={"width": 1400, "height": 900})  # a fresh profile
    context.add_cookies([{"name": cookie[0], "value": cookie[1], "url": base}])
    page = context.new_page()
    cdp = context.new_cdp_session(page)
    cdp.send("Network.enable")
    cdp.send("Performance.enable")
    sizes: dict[str, int] = {}
    urls: dict[str, str] = {}
    cdp.on("Network.responseReceived", lambda e: urls.__setitem__(e["requestId"], e["response"]["url"]))
    cdp.on("Network.loadingFinished", lambda e: sizes.__setitem__(e["requestId"], int(e["encodedDataLength"])))
    page.goto(f"{base}{path}", wait_until="commit")
    page.wait_for_function(drawn_when, polling="raf", timeout=120_000)
    visit = {"drawn": page.evaluate("() => performance.now()") / 1000, "charts": page.evaluate(PER_CHART)}
    metrics = {m["name"]: m["value"] for m in cdp.send("Performance.getMetrics")["metrics"]}
    visit["metrics"] = {  # the page's main-thread seconds, and their main parts
        name: metrics.get(name, float("nan"))
        for name in ("TaskDuration", "ScriptDuration", "LayoutDuration", "RecalcStyleDuration")
    }
    page.wait_for_load_state("networkidle")
    visit["bytes"] = sum(sizes.values())
    visit["plotly_bytes"] = sum(v for k, v in sizes.items() if "plotly" in urls.get(k, ""))
    context.close()
    return visit


def _main_thread(visits: list[dict]) -> str:
    names = {"TaskDuration": "busy", "ScriptDuration": "script", "LayoutDuration": "layout"}
    names["RecalcStyleDuration"] = "style"
    return ", ".join(
        f"{label} {statistics.median(v['metrics'][name] for v in visits):.2f} s" for name, label in names.items()
    )


def browser_figures(base: str, cookie: tuple[str, str], repeat: int, shots: int) -> None:
    if not CHROMIUM.exists():
        print("browser: skipped (no /usr/bin/chromium)")
        return
    from playwright.sync_api import sync_playwright

    small_page = f"/campaigns/bench/shots/b-{shots // 2:06d}"
    overview, small = [], []
    with sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=str(CHROMIUM), args=["--no-sandbox", "--disable-gpu"])
        try:
            for _ in range(repeat):  # alternately, so both see the same load of the machine
                overview.append(_first_visit(chromium, base, cookie, "/campaigns/bench", DRAWN))
                small.append(_first_visit(chromium, base, cookie, small_page, SMALL_PAGE_DRAWN))
        finally:
            chromium.close()
    drawn = [v["drawn"] for v in overview]
    print(f"\nbrowser (headless Chromium, first visit each time, {repeat} runs)")
    print(
        f"  every chart drawn: median {statistics.median(drawn):.2f} s, range {min(drawn):.2f}-{max(drawn):.2f} s "
        f"(target < {TARGET_DRAWN_S} s); main thread: {_main_thread(overview)}"
    )
    for chart_id in [c["id"] for c in overview[-1]["charts"]]:
        runs = [c for v in overview for c in v["charts"] if c["id"] == chart_id]
        times = [r["ms"] for r in runs if r["ms"] is not None]
        last = runs[-1]
        print(
            f"    {chart_id:20s} Plotly {statistics.median(times) if times else float('nan'):7.0f} ms, "
            f"{last['markers']:6,d} markers, {last['images']} images, {last['elements']:6,d} SVG elements"
        )
    print(
        f"  for scale, {small_page} (two small charts): drawn {statistics.median(v['drawn'] for v in small):.2f} s; "
        f"main thread: {_main_thread(small)}"
    )
    print(
        f"  transferred on a first visit: {statistics.median(v['bytes'] for v in overview) / 1e6:.2f} MB "
        f"(plotly.min.js {statistics.median(v['plotly_bytes'] for v in overview) / 1e6:.2f} MB; "
        f"target < {TARGET_FIRST_VISIT_BYTES / 1e6:.0f} MB)"
    )


def other_pages(client, shots: int, repeat: int) -> None:
    paths = [
        "/campaigns",
        "/campaigns/bench/regime.json?x=driver_sigma_r_mm&y=hosing_ratio",
        "/campaigns/bench/live?since=0",
        "/campaigns/bench/shots",
        "/campaigns/bench/shots?page=500",
        "/campaigns/bench/shots?status=outside",
        "/campaigns/bench/shots?flag=DENSITY_MISMATCH&sort=plasma_density_cm3&dir=asc",
        "/campaigns/bench/shots?q=seed&sort=status",
        "/campaigns/bench/shots?from=2026-10-10T00:00&to=2026-10-20T00:00&seed=none",
        f"/campaigns/bench/shots/b-{shots // 2:06d}",  # a shot in the middle: exists at every size
    ]
    print(f"\nother pages (median of {repeat})")
    for path in paths:
        results = [timed_get(client, path) for _ in range(repeat)]
        status = results[-1][2]
        print(
            f"  {path:72s} {statistics.median(r[0] for r in results):7.3f} s {results[-1][1]:10,d} B "
            f"({status}{'' if status == 200 else ' NOT FOUND' if status == 404 else ''})"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--shots", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--db", type=Path, help="SQLite: keep the database here and reuse it when it exists")
    parser.add_argument("--backend", choices=("sqlite", "postgresql"), default="sqlite")
    parser.add_argument("--no-browser", action="store_true", help="the server's figures only")
    parser.add_argument("--build-only", action="store_true", help=argparse.SUPPRESS)
    parser.add_argument("--url", help=argparse.SUPPRESS)
    repo_argument(parser)
    args = parser.parse_args()
    if args.build_only:  # run by build_with under the served checkout's venv
        build_campaign(args.url, args.shots)
        return

    with tempfile.TemporaryDirectory() as tmp:
        if args.backend == "postgresql":  # a scratch database, dropped afterwards
            with scratch_database("postgresql", Path(tmp)) as url:
                build_with(args.repo.resolve(), url, args.shots)
                measure(args, url)
            return
        db = args.db or Path(tmp) / "bench.db"
        if not db.exists():
            build_with(args.repo.resolve(), f"sqlite:///{db}", args.shots)
        measure(args, f"sqlite:///{db}")


def measure(args, url: str) -> None:
    full_read(args, url)
    served = Served(args.repo.resolve(), url)
    print(f"serving {served.repo} ({args.shots:,} shots, {args.backend}); load average {os.getloadavg()[0]:.2f}")
    served.start()
    started = time.perf_counter()
    try:
        token = served.token("viewer", "bench")
        ingest = served.token("ingest", "bench-ingest")
        with closing(signed_in_client(served.base, token)) as client:
            cookie = next((c.name, c.value) for c in client.cookies.jar if c.name == "wakeledger_session")
            print(f"first load {time.perf_counter() - started:.1f} s after the server answered (warm-up on)")
            server_figures(client, args.repeat, served.server.pid, ingest)
            if not args.no_browser:
                browser_figures(served.base, cookie, args.repeat, args.shots)
                other_pages(client, args.shots, args.repeat)
    finally:
        served.stop()
    print(f"load average at the end {os.getloadavg()[0]:.2f}")


def full_read(args, url: str) -> None:
    """The overview's first load with nothing cached: a server started with its overview warm-up
    off (what a viewer pays after a settings change or a re-evaluation, and what the warm-up
    spends after a start), best of three starts."""
    rounds = []
    for _ in range(3):
        served = Served(args.repo.resolve(), url, env={"WAKELEDGER_WARM_OVERVIEW_CAMPAIGNS": "0"})
        served.start()
        try:
            with closing(signed_in_client(served.base, served.token("viewer", "bench"))) as client:
                pid, before, t = served.server.pid, cpu_seconds(served.server.pid), time.perf_counter()
                feeds = overview_feeds(client.get("/campaigns/bench").text)  # the HTML's first load
                html_wall, html_cpu = time.perf_counter() - t, cpu_seconds(pid) - before
                wall, cpu = server_round(client, pid, feeds, {})  # its HTML again (from memory) and every feed
                rounds.append((html_wall + wall, html_cpu + cpu))
        finally:
            served.stop()
    wall, cpu = min(rounds, key=lambda r: r[1])
    print(
        f"a full read (nothing cached, warm-up off): HTML + feeds {wall:.3f} s wall, {cpu:.3f} s server CPU "
        f"(best of {len(rounds)} starts; range {min(r[1] for r in rounds):.3f}-{max(r[1] for r in rounds):.3f} s CPU)"
    )


if __name__ == "__main__":
    main()
