"""A tiny HTTP receiver of alerts on 127.0.0.1, in a thread of the test (the standard
library's http.server): it records every POST (path, headers, JSON body) and answers the
status codes it is told to, in turn (the last one repeats). ``hold()`` makes it keep each
request open until ``release()``, to show that nothing upstream waits on it."""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any


@dataclass
class Received:
    path: str
    headers: dict[str, str]
    body: Any


@dataclass
class Receiver:
    url: str
    answers: list[int] = field(default_factory=lambda: [200])
    received: list[Received] = field(default_factory=list)
    changed: threading.Condition = field(default_factory=threading.Condition)
    held: threading.Event = field(default_factory=threading.Event)  # set: requests pass

    def hold(self) -> None:
        self.held.clear()

    def release(self) -> None:
        self.held.set()

    def wait_for(self, count: int, timeout_s: float = 30.0) -> list[Received]:
        """The requests once at least ``count`` have arrived (bounded wait on a condition)."""
        with self.changed:
            if not self.changed.wait_for(lambda: len(self.received) >= count, timeout_s):
                raise AssertionError(f"the receiver got {len(self.received)} request(s), expected {count}")
            return list(self.received)


@contextmanager
def alert_receiver(answers: Sequence[int] = (200,)) -> Iterator[Receiver]:
    """A receiver at ``receiver.url`` (http://127.0.0.1:PORT/alerts) answering ``answers`` in turn."""
    state: dict[str, Receiver] = {}

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self) -> None:  # noqa: N802 - http.server's name
            receiver = state["r"]
            length = int(self.headers.get("Content-Length") or 0)
            raw = self.rfile.read(length)
            with receiver.changed:
                n = len(receiver.received)
                receiver.received.append(Received(self.path, dict(self.headers.items()), json.loads(raw or b"null")))
                receiver.changed.notify_all()
            receiver.held.wait(60)
            status = receiver.answers[min(n, len(receiver.answers) - 1)]
            self.send_response(status)
            self.send_header("Content-Length", "0")
            self.end_headers()

        def log_message(self, *_args: Any) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    server.daemon_threads = True
    receiver = Receiver(f"http://127.0.0.1:{server.server_address[1]}/alerts", list(answers))
    receiver.release()
    state["r"] = receiver
    thread = threading.Thread(target=server.serve_forever, name="alert-receiver", daemon=True)
    thread.start()
    try:
        yield receiver
    finally:
        receiver.release()
        server.shutdown()
        server.server_close()
        thread.join(timeout=10)
