"""Process metrics in the Prometheus text exposition format (version 0.0.4), no dependency.

Counters and histograms live in this process; ``render()`` writes the text served at
``GET /metrics``.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Iterable

CONTENT_TYPE = "text/plain; version=0.0.4; charset=utf-8"
LabelValues = tuple[tuple[str, str], ...]


def _labels(labels: LabelValues, extra: Iterable[tuple[str, str]] = ()) -> str:
    items = list(labels) + list(extra)
    if not items:
        return ""

    def esc(v: str) -> str:
        return v.replace("\\", "\\\\").replace("\n", "\\n").replace('"', '\\"')

    return "{" + ",".join(f'{k}="{esc(v)}"' for k, v in items) + "}"


def _num(x: float) -> str:
    x = float(x)
    if math.isinf(x):
        return "+Inf" if x > 0 else "-Inf"
    if x.is_integer() and abs(x) < 1e15:
        return str(int(x))
    return repr(x)


class Counter:
    def __init__(self, name: str, help_text: str) -> None:
        self.name, self.help = name, help_text
        self._values: dict[LabelValues, float] = {}
        self._lock = threading.Lock()

    def inc(self, amount: float = 1.0, **labels: str) -> None:
        key = tuple(sorted(labels.items()))
        with self._lock:
            self._values[key] = self._values.get(key, 0.0) + amount

    def value(self, **labels: str) -> float:
        return self._values.get(tuple(sorted(labels.items())), 0.0)

    def render(self) -> list[str]:
        lines = [f"# HELP {self.name} {self.help}", f"# TYPE {self.name} counter"]
        with self._lock:
            items = sorted(self._values.items()) or [((), 0.0)]
        lines += [f"{self.name}{_labels(k)} {_num(v)}" for k, v in items]
        return lines


class Histogram:
    def __init__(self, name: str, help_text: str, buckets: Iterable[float]) -> None:
        self.name, self.help = name, help_text
        self.buckets = sorted(buckets)
        self._series: dict[LabelValues, list[float]] = {}  # bucket counts..., sum, count
        self._lock = threading.Lock()

    def observe(self, value: float, **labels: str) -> None:
        key = tuple(sorted(labels.items()))
        with self._lock:
            s = self._series.setdefault(key, [0.0] * (len(self.buckets) + 2))
            for i, upper in enumerate(self.buckets):
                if value <= upper:
                    s[i] += 1
            s[-2] += value
            s[-1] += 1

    def count(self, **labels: str) -> float:
        s = self._series.get(tuple(sorted(labels.items())))
        return s[-1] if s else 0.0

    def render(self) -> list[str]:
        lines = [f"# HELP {self.name} {self.help}", f"# TYPE {self.name} histogram"]
        with self._lock:
            items = sorted((k, list(v)) for k, v in self._series.items())
        for key, s in items:
            for upper, n in zip(self.buckets, s, strict=False):
                lines.append(f"{self.name}_bucket{_labels(key, [('le', _num(upper))])} {_num(n)}")
            lines.append(f"{self.name}_bucket{_labels(key, [('le', '+Inf')])} {_num(s[-1])}")
            lines.append(f"{self.name}_sum{_labels(key)} {_num(s[-2])}")
            lines.append(f"{self.name}_count{_labels(key)} {_num(s[-1])}")
        return lines


SHOTS_INGESTED = Counter("wakeledger_shots_ingested_total", "Shots stored and evaluated (new shots and corrections).")
SHOTS_UNCHANGED = Counter(
    "wakeledger_shots_unchanged_total", "Shots re-posted with an identical payload (nothing stored)."
)
SHOTS_REJECTED = Counter("wakeledger_shots_rejected_total", "Shots refused, by reason (invalid, conflict).")
SHOTS_REEVALUATED = Counter("wakeledger_shots_reevaluated_total", "Shots re-evaluated after a settings change.")
SHOT_EXCLUSIONS = Counter(
    "wakeledger_shot_exclusions_total",
    "Shots excluded from counts and summaries, or restored, by action (exclude, restore).",
)
EVALUATION_SECONDS = Histogram(
    "wakeledger_evaluation_seconds",
    "Wall time of one model evaluation call (one call covers a whole batch).",
    (0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0),
)
EVALUATION_SHOTS = Counter("wakeledger_evaluated_shots_total", "Shots passed through the model, by mode.")
REGISTRY: list[Counter | Histogram] = [
    SHOTS_INGESTED,
    SHOTS_UNCHANGED,
    SHOTS_REJECTED,
    SHOTS_REEVALUATED,
    SHOT_EXCLUSIONS,
    EVALUATION_SECONDS,
    EVALUATION_SHOTS,
]


def render() -> str:
    lines: list[str] = []
    for metric in REGISTRY:
        lines += metric.render()
    return "\n".join(lines) + "\n"
