"""Prints what a hostile batch costs the server: a 13 MB batch of 5,000 objects
``{"x": [NaN x 650]}`` (3.25 million bad numbers), posted with an ingest token.

Figures: the answer's time, size and error count, the server's memory before and
after, and the longest /healthz answer while the bomb is handled (polled every 50 ms
from another connection); then the same 13 MB posted without a token.

Run: .venv/bin/python tests/bench/bench_error_bomb.py [--repo PATH] (PATH: the checkout
that serves, e.g. the code before a change). SQLite in a scratch folder.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx

sys.path.insert(0, str(Path(__file__).resolve().parent))
from served import Served, repo_argument, rss_mb, scratch_database  # noqa: E402


def bomb(shots: int = 5000, per_shot: int = 650) -> bytes:
    one = '{"x": [' + ",".join(["NaN"] * per_shot) + "]}"
    return ('{"shots": [' + ",".join([one] * shots) + "]}").encode()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    repo_argument(parser)
    args = parser.parse_args()
    body = bomb()
    print(f"repo: {args.repo}")
    print(f"body: {len(body) / 1e6:.1f} MB, 5,000 objects of 650 NaN")
    with tempfile.TemporaryDirectory() as tmp, scratch_database("sqlite", Path(tmp)) as url:
        served = Served(args.repo, url)
        served.run("db", "upgrade")
        token = served.token("admin", "bench-bomb")
        headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
        served.start()
        try:
            with httpx.Client(base_url=served.base, timeout=600) as http:
                http.post("/api/v1/campaigns", json={"slug": "bomb", "name": "Bomb"}, headers=headers)
                assert served.server is not None
                before = rss_mb(served.server.pid)
                stalls: list[float] = []
                memory: list[float] = [before]
                done = threading.Event()
                pid = served.server.pid

                def watch() -> None:
                    with httpx.Client(base_url=served.base, timeout=120) as probe:
                        while not done.is_set():
                            start = time.perf_counter()
                            probe.get("/healthz")
                            stalls.append(time.perf_counter() - start)
                            time.sleep(0.05)

                def sample() -> None:
                    while not done.is_set():
                        memory.append(rss_mb(pid))
                        time.sleep(0.02)

                watcher = threading.Thread(target=watch)
                sampler = threading.Thread(target=sample)
                watcher.start()
                sampler.start()
                start = time.perf_counter()
                answer = http.post("/api/v1/campaigns/bomb/shots/batch", content=body, headers=headers)
                seconds = time.perf_counter() - start
                done.set()
                watcher.join(timeout=120)
                sampler.join(timeout=120)
                after = rss_mb(served.server.pid)
                document = answer.json()
                start = time.perf_counter()
                anonymous = http.post(
                    "/api/v1/campaigns/bomb/shots/batch", content=body, headers={"Content-Type": "application/json"}
                )
                anonymous_s = time.perf_counter() - start
        finally:
            served.stop()
    print(f"answer: HTTP {answer.status_code} in {seconds:.2f} s, {len(answer.content) / 1e6:.3f} MB, "
          f"{len(document.get('errors', [])):,} error entries"
          + (f" (error_count {document['error_count']:,})" if "error_count" in document else ""))  # fmt: skip
    print(f"server memory: {before:.0f} MB before, {max(memory):.0f} MB at the peak, {after:.0f} MB after")
    print(f"/healthz while the bomb was handled: longest {max(stalls):.2f} s over {len(stalls)} probes")
    print(f"the same body without a token: HTTP {anonymous.status_code} in {anonymous_s:.2f} s")


if __name__ == "__main__":
    main()
