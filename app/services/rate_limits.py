"""Per-token rate limits on writes and expensive reads (the ``limits`` library).

Two budgets, each a ``limits`` rate string ("1200/minute"; empty turns it off), counted
per token (the anonymous demo visitor per client address) in a moving window:

- ``write``: every request that changes something, or asks the server to compute
  (POST, PUT, PATCH, DELETE);
- ``expensive_read``: downloads and large documents (weekly exports, the shot table's
  CSV, detailed-run results and figures).

Past a budget the caller gets RateLimited with the seconds until a request is allowed
again (429 with Retry-After). The counters live in the storage the URI names:
``memory://`` counts per server process; several app processes behind one proxy share a
budget through a common store (e.g. ``redis://host:6379``, with the redis client installed).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from limits import RateLimitItem, parse, storage, strategies

from app.errors import RateLimited

_WHAT = {"write": "writes", "expensive_read": "downloads and large reads"}


def parse_rate(text: str) -> RateLimitItem | None:
    """A ``limits`` rate string, or None for an empty one (no limit); ValueError if unreadable."""
    if not text.strip():
        return None
    return parse(text)


@dataclass
class RateLimiter:
    """The budgets of one app: ``check(kind, key)`` counts a request or raises RateLimited."""

    rates: dict[str, RateLimitItem | None]
    limiter: strategies.MovingWindowRateLimiter

    @classmethod
    def configured(cls, writes: str, expensive_reads: str, storage_uri: str = "memory://") -> RateLimiter:
        store = storage.storage_from_string(storage_uri)
        return cls(
            {"write": parse_rate(writes), "expensive_read": parse_rate(expensive_reads)},
            strategies.MovingWindowRateLimiter(store),
        )

    def check(self, kind: str, key: str) -> None:
        rate = self.rates[kind]
        if rate is None or self.limiter.hit(rate, kind, key):
            return
        reset_at, _remaining = self.limiter.get_window_stats(rate, kind, key)
        wait = max(1, math.ceil(reset_at - time.time()))
        period = rate.GRANULARITY.name if rate.multiples == 1 else f"{rate.multiples} {rate.GRANULARITY.name}s"
        raise RateLimited(
            f"too many {_WHAT[kind]} from this token: at most {rate.amount} per {period}; retry in {wait} s", wait
        )
