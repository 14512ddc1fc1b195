"""Prints how long `wakeledger demo` takes to serve, on a fresh database and on a reused one.

Target: under 60 s on a fresh machine. Run: .venv/bin/python tests/bench/bench_demo_start.py
(starts the demo on a free 127.0.0.1 port in a scratch folder; bounded waits; stops it).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
CAMPAIGN_PAGE = "/campaigns/quillmarsh-autumn-2026"
LIMIT_S = 120.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _time_to_serve(folder: Path) -> tuple[float, float, str]:
    """Seconds until /healthz answers, until the campaign page answers, and the printed lines."""
    port = _free_port()
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    start = time.perf_counter()
    proc = subprocess.Popen(
        [sys.executable, "-m", "app.cli", "demo", "--port", str(port)],
        cwd=folder,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        healthy = page = float("nan")
        while time.perf_counter() - start < LIMIT_S:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/healthz", timeout=2):
                    healthy = time.perf_counter() - start
                break
            except OSError:
                if proc.poll() is not None:
                    break
                time.sleep(0.05)
        with urllib.request.urlopen(f"http://127.0.0.1:{port}{CAMPAIGN_PAGE}", timeout=30) as r:
            r.read()
            page = time.perf_counter() - start
    finally:
        proc.terminate()
        out, _ = proc.communicate(timeout=20)
    return healthy, page, out


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for label in ("fresh database", "reused database"):
            healthy, page, out = _time_to_serve(folder)
            first_line = out.splitlines()[0] if out else ""
            print(f"{label:16s}: /healthz after {healthy:5.1f} s, campaign page after {page:5.1f} s  ({first_line})")


if __name__ == "__main__":
    main()
