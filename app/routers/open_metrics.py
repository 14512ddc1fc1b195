"""``/metrics`` without a token, for a Prometheus scraper (``WAKELEDGER_OPEN_METRICS``).

Off by default: ``GET /metrics`` needs a viewer token. Two ways to open it:

- a path (``/metrics-open``): ``open_metrics_route`` answers it on the main port without a
  token (give the proxy a rule that keeps the path off the public side);
- a port (``9108``, bound to 127.0.0.1) or ``host:port``: ``MetricsListener`` serves only
  ``GET /metrics`` there, in a thread of the ``wakeledger serve`` process (the counters are
  that process's), so the main port keeps every route behind its token.
"""

from __future__ import annotations

import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from fastapi.responses import PlainTextResponse

from app.services import metrics


def open_metrics_route() -> PlainTextResponse:
    return PlainTextResponse(metrics.render(), media_type=metrics.CONTENT_TYPE)


def listener_address(setting: str) -> tuple[str, int] | None:
    """(host, port) of a port-valued WAKELEDGER_OPEN_METRICS; None for a path or empty."""
    if not setting or setting.startswith("/"):
        return None
    host, _, port = setting.rpartition(":")
    return (host.strip("[]") or "127.0.0.1", int(port))


class _MetricsHandler(BaseHTTPRequestHandler):
    server_version = "wakeledger-metrics"

    def do_GET(self) -> None:  # noqa: N802 - the standard library's name
        if self.path.split("?", 1)[0] != "/metrics":
            self.send_error(404, "only /metrics is served on this port")
            return
        body = metrics.render().encode("utf-8")
        self.send_response(200)
        self.send_header("Content-Type", metrics.CONTENT_TYPE)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, format: str, *args: object) -> None:  # scrapes every few seconds: not logged
        return


class MetricsListener:
    """Bound on creation (OSError when the port is taken); ``with`` serves it in a daemon thread."""

    def __init__(self, host: str, port: int) -> None:
        self.server = ThreadingHTTPServer((host, port), _MetricsHandler)
        self.server.daemon_threads = True

    @property
    def port(self) -> int:
        return int(self.server.server_address[1])

    def __enter__(self) -> MetricsListener:
        threading.Thread(target=self.server.serve_forever, name="open-metrics", daemon=True).start()
        return self

    def __exit__(self, *_exc: object) -> None:
        self.server.shutdown()
        self.server.server_close()
