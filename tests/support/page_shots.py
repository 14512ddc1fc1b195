"""A few dozen invented shots with every status, for the page and browser tests.

Built from the worked examples: small density / population / seed-position steps around
example 1 (nominal), some with a measured frequency off by a few per cent (marginal or
outside DENSITY_MISMATCH), some unseeded (marginal), and examples 2 and 3 (outside).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from typing import Any

START = datetime(2026, 11, 16, 8, 0, tzinfo=UTC)


def page_shots(
    make_shot: Callable[..., dict[str, Any]], count: int = 36, start: datetime = START
) -> list[dict[str, Any]]:
    shots = []
    for i in range(count):
        taken = (start + timedelta(minutes=7 * i)).isoformat().replace("+00:00", "Z")
        wobble = math.sin(0.9 * i)
        changes: dict[str, Any] = {
            "plasma.density_cm3": 4.0e14 * (1 + 0.002 * wobble),
            "driver.population": 2.0e11 * (1 + 0.03 * math.cos(0.7 * i)),
            "seed.position_mm": 35.0 + 0.5 * wobble,
            "measured.modulation_freq_ghz": 179.6 * (1 + 0.001 * wobble),
            "measured.modulation_phase_rad": 0.2 * wobble,
        }
        case = 0
        notes, tags = f"routine shot {i}", ["scan-a"] if i % 2 else ["scan-b"]
        if i % 9 == 4:
            changes["measured.modulation_freq_ghz"] = 179.6 * 1.03  # 3 % off: marginal
            notes = "frequency looks off <b>check</b> & retune"
        if i % 9 == 7:
            changes = {}
            case, notes, tags = 1, "wide beam test", ["wide"]
        if i % 12 == 10:
            changes = {}
            case, notes, tags = 2, "no seed this time", ["unseeded"]
        shot = make_shot(case, shot_id=f"pg-{i:04d}", taken_at=taken, changes=changes)
        shot["notes"], shot["tags"] = notes, tags
        shots.append(shot)
    return shots
