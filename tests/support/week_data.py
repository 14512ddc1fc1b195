"""Invented shots for the summary tests and the export benchmark: stored straight into
the shots, evaluations and flags tables (Core bulk inserts), with random but
self-consistent values — each shot's status is the worst severity of its flags.

The numbers are arbitrary test data, not a physics scenario: the summary is checked
against what is stored, not against the model.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta

import numpy as np
from sqlalchemy import insert
from sqlalchemy.orm import Session

from app.store.exports import EVALUATION_OUTPUT_COLUMNS
from app.tables import Campaign, Evaluation, Flag, Shot

FLAG_RULES = (
    ("BUNCH_NOT_LONG", "bunch_length_over_plasma_wavelength"),
    ("BEAM_TOO_WIDE", "kp_sigma_r"),
    ("WEAK_GROWTH", "growth_margin_efolds"),
    ("WEAK_SEED", "seed_to_noise_efolds"),
    ("DENSITY_MISMATCH", "frequency_mismatch_pct"),
    ("HOSING_RISK", "hosing_ratio"),
    ("UNSEEDED", None),
    ("ASYMPTOTIC_LIMIT", "asymptotic_validity"),
)
_RANK = {"": 0, "info": 0, "marginal": 1, "outside": 2}


def add_campaign(session: Session, slug: str = "test-week", tz: str = "UTC") -> Campaign:
    campaign = Campaign(
        slug=slug,
        name=f"Campaign {slug}",
        timezone=tz,
        description="",
        model_settings={},
        settings_version=1,
        created_at=datetime(2026, 1, 1, tzinfo=UTC),
    )
    session.add(campaign)
    session.flush()
    return campaign


def spread_over_week(start_utc: datetime, n: int, seconds: float = 7 * 86400 - 1) -> list[datetime]:
    """n times evenly spread from start_utc (inclusive) over `seconds`."""
    step = seconds / max(n, 1)
    return [start_utc + timedelta(seconds=i * step) for i in range(n)]


def insert_shots(
    session: Session,
    campaign: Campaign,
    taken_at: Sequence[datetime],
    *,
    seed: int = 0,
    prefix: str = "s",
    evaluated: bool = True,
    measured_fraction: float = 0.7,
) -> list[int]:
    """Store one shot per time (times are UTC-aware); returns their primary keys."""
    rng = np.random.default_rng(seed)
    n = len(taken_at)
    if n == 0:
        return []
    now = datetime(2026, 12, 1, tzinfo=UTC)
    density = 7e14 * (1 + 0.01 * rng.standard_normal(n))
    seeded = rng.random(n) < 0.8
    measured = rng.random(n) < measured_fraction
    phase = np.where(measured, 0.3 + 0.2 * rng.standard_normal(n), np.nan)
    freq = np.where(measured, 240.0 * (1 + 0.02 * rng.standard_normal(n)), np.nan)

    def opt(x: float) -> float | None:
        return None if math.isnan(x) else float(x)

    shot_rows = []
    for i, t in enumerate(taken_at):
        sid = f"{prefix}-{i:06d}"
        shot_rows.append(
            {
                "campaign_id": campaign.id,
                "shot_id": sid,
                "taken_at": t.astimezone(UTC),
                "revision": 1,
                "notes": "note, with a comma" if i % 7 == 0 else "",
                "tags": ["scan-a"] if i % 3 == 0 else [],
                "raw_payload": {"shot_id": sid},
                "payload_sha256": hashlib.sha256(sid.encode()).hexdigest(),
                "created_at": now,
                "updated_at": now,
                "driver_species": "proton",
                "driver_momentum_gev": 400.0,
                "driver_population": float(3e11 * (1 + 0.05 * rng.standard_normal())),
                "driver_sigma_z_mm": float(80 + 5 * rng.standard_normal()),
                "driver_sigma_r_mm": float(0.2 + 0.01 * rng.standard_normal()),
                "driver_emittance_n_mm_mrad": float(2.0 + 0.1 * rng.standard_normal()),
                "driver_offset_x_mm": float(0.05 * rng.standard_normal()),
                "driver_offset_y_mm": float(0.05 * rng.standard_normal()),
                "driver_angle_x_mrad": 0.0,
                "driver_angle_y_mrad": 0.0,
                "plasma_density_cm3": float(density[i]),
                "plasma_gradient_pct_per_m": float(rng.choice([0.0, 0.5, 1.0])),
                "plasma_length_m": 10.0,
                "plasma_ion_mass_amu": 85.47,
                "plasma_ion_charge": 1,
                "seed_method": "ionization_front" if seeded[i] else "none",
                "seed_position_mm": float(rng.uniform(-50, 50)) if seeded[i] else None,
                "measured_modulation_freq_ghz": opt(freq[i]),
                "measured_modulation_phase_rad": opt(phase[i]),
            }
        )
    pks = [
        pk
        for (pk,) in session.execute(
            insert(Shot.__table__).returning(Shot.__table__.c.id, sort_by_parameter_order=True), shot_rows
        )
    ]
    if not evaluated:
        return pks

    outputs = {name: rng.normal(5.0, 2.0, n) for name in EVALUATION_OUTPUT_COLUMNS}
    outputs["phase_per_pct_density_rad"] = rng.uniform(1.0, 1.4, n)
    outputs["frequency_mismatch_pct"] = np.where(measured, rng.normal(0.5, 1.5, n), np.nan)
    outputs["implied_density_cm3"] = np.where(
        measured, density * (1 + outputs["frequency_mismatch_pct"] / 100) ** 2, np.nan
    )
    outputs["waist_beta_m"][rng.random(n) < 0.1] = np.nan

    eval_rows, flag_rows = [], []
    for i, pk in enumerate(pks):
        worst = 0
        for code, metric in FLAG_RULES:
            if code == "UNSEEDED":
                severity = "" if seeded[i] else "marginal"
            elif code == "ASYMPTOTIC_LIMIT":
                severity = "info" if rng.random() < 0.2 else ""
            else:
                if metric == "frequency_mismatch_pct" and not measured[i]:
                    continue
                r = rng.random()
                severity = "outside" if r < 0.02 else "marginal" if r < 0.08 else ""
            if not severity:
                continue
            worst = max(worst, _RANK[severity])
            value = float(outputs[metric][i]) if metric else None
            flag_rows.append(
                {
                    "shot_pk": pk,
                    "campaign_id": campaign.id,
                    "code": code,
                    "severity": severity,
                    "value": value,
                    "limit_value": 1.0 if metric else None,
                    "message": f"{code.lower().replace('_', ' ')} on shot {i}",
                }
            )
        row = {
            "shot_pk": pk,
            "campaign_id": campaign.id,
            "model_version": "test-1",
            "settings_version": 1,
            "status": ("nominal", "marginal", "outside")[worst],
            "evaluated_at": now,
        }
        for name in EVALUATION_OUTPUT_COLUMNS:
            v = float(outputs[name][i])
            row[name] = None if math.isnan(v) else v
        eval_rows.append(row)
    session.execute(insert(Evaluation.__table__), eval_rows)
    if flag_rows:
        session.execute(insert(Flag.__table__), flag_rows)
    return pks
