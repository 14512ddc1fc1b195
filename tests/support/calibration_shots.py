"""Invented shots with known calibration truths for the calibration tests and benchmark: the
logged density reads low by a known scale (which may step at a known shot), the measured
frequency is the model's reference frequency at the true density with noise, and the halo
radius and witness energy follow power laws of the project proxies with known exponents.

Test data only, not a physics scenario: every truth is put in here to be found again.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np

import model
from model.calibration import energy_gain_proxy, kick_angle_proxy

HALO_EXPONENT = 0.8
HALO_PREFACTOR = 0.35
WITNESS_EXPONENT = 1.0
WITNESS_PREFACTOR = 0.6


def synthetic_columns(
    base: Mapping[str, Any],
    n: int,
    *,
    scale: float,
    scale_after: float | None = None,
    step_at: int | None = None,
    frequency_noise: float = 0.002,
    seed: int = 1,
) -> dict[str, np.ndarray]:
    """Dotted-path columns of n shots around ``base`` (a shot in the API shape, no gradient):
    density scanned ±15 %, population and length varied; measured.* filled with the truths."""
    rng = np.random.default_rng(seed)
    flat: dict[str, Any] = {}
    for section in ("driver", "plasma", "seed"):
        for key, value in (base.get(section) or {}).items():
            flat[f"{section}.{key}"] = value
    columns: dict[str, np.ndarray] = {}
    for f in model.INPUT_FIELDS:
        value = flat.get(f.path)
        if f.kind == "enum":
            column = np.empty(n, dtype=object)
            column[:] = value if value is not None else (f.default if f.default is not None else None)
            columns[f.path] = column
        else:
            columns[f.path] = np.full(n, np.nan if value is None else float(value))
    columns["plasma.gradient_pct_per_m"] = np.zeros(n)
    columns["plasma.density_cm3"] = columns["plasma.density_cm3"] * rng.uniform(0.85, 1.15, n)
    columns["driver.population"] = columns["driver.population"] * rng.uniform(0.8, 1.2, n)
    columns["plasma.length_m"] = columns["plasma.length_m"] * rng.uniform(0.9, 1.1, n)
    truth = np.full(n, scale)
    if scale_after is not None and step_at is not None:
        truth[step_at:] = scale_after
    true_density = columns["plasma.density_cm3"] * truth
    at_truth = model.evaluate_table({**columns, "plasma.density_cm3": true_density})
    as_logged = model.evaluate_table(columns)
    columns["measured.modulation_freq_ghz"] = at_truth["plasma_frequency_ghz"] * (
        1 + frequency_noise * rng.standard_normal(n)
    )
    kick = kick_angle_proxy(
        as_logged["wakefield_estimate_mv_m"], columns["plasma.length_m"], columns["driver.momentum_gev"]
    )
    columns["measured.halo_radius_mm"] = HALO_PREFACTOR * kick**HALO_EXPONENT * np.exp(0.03 * rng.standard_normal(n))
    gain = energy_gain_proxy(
        as_logged["wakefield_estimate_mv_m"], columns["plasma.length_m"], as_logged["saturation_length_m"]
    )
    columns["measured.witness_energy_mev"] = (
        WITNESS_PREFACTOR * gain**WITNESS_EXPONENT * np.exp(0.03 * rng.standard_normal(n))
    )
    columns["measured.modulation_phase_rad"] = 0.4 + 0.1 * rng.standard_normal(n)
    columns["measured.microbunch_count"] = np.round(columns["driver.sigma_z_mm"] / as_logged["plasma_wavelength_mm"])
    return columns


def shots_from_columns(
    columns: Mapping[str, np.ndarray], start: datetime = datetime(2026, 11, 16, 8, tzinfo=UTC), every_s: float = 60.0
) -> list[dict[str, Any]]:
    """The columns as API shots, one every ``every_s`` seconds from ``start``."""
    n = len(next(iter(columns.values())))
    shots = []
    for i in range(n):
        shot: dict[str, Any] = {
            "shot_id": f"cal-{i:05d}",
            "taken_at": (start + timedelta(seconds=i * every_s)).isoformat(),
        }
        for path, values in columns.items():
            value = values[i]
            if value is None or (isinstance(value, float) and not np.isfinite(value)):
                continue
            section, key = path.split(".")
            shot.setdefault(section, {})[key] = value if isinstance(value, str) else float(value)
        shots.append(copy.deepcopy(shot))
    return shots
