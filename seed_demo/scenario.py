"""The invented demo campaign: a fictional facility, its calendar, programme and machine.

Nothing here describes a real facility, experiment, laboratory or person, and the
machine numbers are our own (invented, plausible for a long proton bunch and a
laser-ionised vapour cell). The calendar is fixed so that the demo is the same on
every machine: three ISO weeks, 2026-W46 to 2026-W48, in the campaign's local time zone.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, time
from typing import Any

DEMO_SEED = 20261109

FACILITY_NAME = "Quillmarsh Proton Test Line"
CAMPAIGN_SLUG = "quillmarsh-autumn-2026"
CAMPAIGN_NAME = "Quillmarsh autumn 2026 self-modulation campaign"
# A real IANA zone (the facility is invented, the clock is not). It is UTC-9 in
# November, so the late shift crosses midnight UTC: local days and UTC days differ,
# while every shift stays inside its ISO week in both (no beam on Sundays).
CAMPAIGN_TIMEZONE = "America/Anchorage"
CAMPAIGN_FIRST_DAY = date(2026, 11, 9)  # Monday of ISO week 2026-W46
CAMPAIGN_LAST_DAY = date(2026, 11, 29)  # Sunday of ISO week 2026-W48
CAMPAIGN_WEEKS = ("2026-W46", "2026-W47", "2026-W48")
# The demo's "current week": the last week of the fixed calendar (the latest shot is in it).
CURRENT_WEEK = "2026-W48"

CAMPAIGN_DESCRIPTION = (
    f"Invented demonstration data for a fictional facility, the {FACILITY_NAME}: a "
    "three-week self-modulation campaign (ISO weeks 2026-W46 to 2026-W48, local time "
    f"{CAMPAIGN_TIMEZONE}). a long proton bunch is seeded by an ionisation front in a "
    "laser-ionised krypton cell; the programme has density, seed-position, gradient and "
    "bunch-population scans, an electron-bunch seeding test, a day of poor alignment, a "
    "light-ion test and, in the last week, a slow drift of the density gauge calibration. "
    "the facility, its machine numbers and its crews are made up."
)

# Shifts in local time; no beam outside them.
SHIFTS: dict[str, tuple[time, time]] = {
    "early": (time(6, 0), time(14, 0)),
    "late": (time(14, 0), time(22, 0)),
}
CREWS = ("A", "B", "C")


@dataclass(frozen=True)
class Block:
    """A run of shots with one programme; ``shots`` None means the rest of the shift."""

    programme: str
    shots: int | None = None
    options: dict[str, Any] = field(default_factory=dict)


# Local date -> shift -> the blocks run in that shift. Days or shifts not listed have no beam.
def _d(day: int) -> date:
    return date(2026, 11, day)


PLAN: dict[date, dict[str, tuple[Block, ...]]] = {
    # 2026-W46
    _d(9): {"early": (Block("commissioning", 34), Block("production")), "late": (Block("production"),)},
    _d(10): {
        "early": (Block("density-scan", options={"scan": "wide", "part": (1, 2)}),),
        "late": (Block("density-scan", options={"scan": "wide", "part": (2, 2)}),),
    },
    _d(11): {
        "early": (Block("seed-scan", options={"scan": "wide", "part": (1, 2)}),),
        "late": (Block("seed-scan", options={"scan": "wide", "part": (2, 2)}),),
    },
    _d(12): {"early": (Block("production"),), "late": (Block("production"),)},
    _d(13): {"early": (Block("gradient-scan"),), "late": (Block("production"),)},
    _d(14): {"early": (Block("ebunch-seed", options={"scan": True}),)},
    # 2026-W47
    _d(16): {"early": (Block("production"),), "late": (Block("intensity-scan"),)},
    _d(17): {
        "early": (Block("alignment", options={"recovery": False}),),
        "late": (Block("alignment", options={"recovery": True}),),
    },
    # Wednesday early shift: access for maintenance, no beam.
    _d(18): {"late": (Block("production", 40), Block("quad-trip", 6), Block("production"))},
    _d(19): {"early": (Block("ion-test"),), "late": (Block("production"),)},
    _d(20): {"early": (Block("production"),), "late": (Block("production"),)},
    _d(21): {"early": (Block("unseeded-reference", 30), Block("production"))},
    # 2026-W48
    _d(23): {"early": (Block("production"),), "late": (Block("production"),)},
    _d(24): {"early": (Block("production"),), "late": (Block("density-scan", options={"scan": "fine"}),)},
    _d(25): {"early": (Block("production"),), "late": (Block("production"),)},
    _d(26): {"early": (Block("seed-scan", options={"scan": "fine"}),), "late": (Block("production"),)},
    _d(27): {"early": (Block("ebunch-seed", options={"scan": False}),), "late": (Block("production"),)},
    _d(28): {"early": (Block("production"),)},
}

# Beam interruptions inside a shift (local date, start, end): no shots then.
BEAM_STOPS: tuple[tuple[date, time, time], ...] = (
    (_d(12), time(17, 10), time(19, 40)),  # injector fault
    (_d(20), time(9, 30), time(10, 50)),  # cell heater interlock
    (_d(25), time(15, 0), time(16, 20)),  # cooling water alarm
)

# The slow density-gauge calibration drift: the true density runs ahead of the recorded
# one by DRIFT_END_FRACTION * x**DRIFT_POWER, x going from 0 at the start to 1 at the end.
DRIFT_START = (_d(20), time(6, 0))
DRIFT_END = (_d(28), time(14, 0))
DRIFT_END_FRACTION = 0.11
DRIFT_POWER = 8.0

# The machine: invented nominal values and shot-to-shot relative jitter (rms).
NOMINAL: dict[str, float] = {
    "momentum_gev": 160.0,
    "population": 1.45e11,
    "sigma_z_mm": 62.0,
    "sigma_r_mm": 0.22,
    "emittance_n_mm_mrad": 1.5,
    "density_cm3": 5.8e14,
    "gradient_pct_per_m": 0.30,
    "length_m": 9.2,
    "ion_mass_amu": 83.798,  # krypton
    "seed_position_mm": 24.0,
    "ebunch_position_mm": 135.0,
    "ebunch_charge_pc": 180.0,
    "ebunch_sigma_z_mm": 0.28,
    "ebunch_sigma_r_mm": 0.21,
    "witness_injection_mev": 18.0,
}
JITTER: dict[str, float] = {
    "population": 0.04,
    "sigma_z_mm": 0.015,
    "sigma_r_mm": 0.025,
    "emittance_n_mm_mrad": 0.04,
    "ebunch_charge_pc": 0.05,
    "true_density": 0.0012,  # shot-to-shot density jitter of the cell
}
# Absolute rms jitter of alignment and timing.
OFFSET_RMS_MM = 0.012
ANGLE_RMS_MRAD = 0.006
SEED_TIMING_RMS_MM = 0.3
FREQUENCY_RESOLUTION = 0.0008  # relative rms of the heterodyne frequency measurement
PHASE_RESOLUTION_RAD = 0.05
PHASE_CALIBRATION_RAD = 0.9  # phase of the reference slice at the recorded density

# Scans: step values, and relative weights (shots per step).
DENSITY_SCAN_WIDE = (
    (2.2e12, 0.3),
    (6.0e12, 0.3),
    (1.5e13, 0.5),
    (3.0e13, 0.8),
    (6.0e13, 1.0),
    (1.2e14, 1.0),
    (2.2e14, 1.0),
    (3.5e14, 1.0),
    (4.6e14, 1.0),
    (5.8e14, 1.2),
    (7.0e14, 1.0),
    (8.5e14, 1.0),
    (1.05e15, 1.0),
    (1.35e15, 1.0),
    (1.8e15, 0.8),
    (2.4e15, 0.6),
)
DENSITY_SCAN_FINE = tuple((5.8e14 * f, 1.0) for f in (0.90, 0.93, 0.96, 0.98, 1.0, 1.02, 1.04, 1.07, 1.10))
SEED_SCAN_WIDE = (
    (-45.0, 1.0),
    (-25.0, 1.0),
    (-10.0, 1.0),
    (0.0, 1.0),
    (12.0, 1.0),
    (24.0, 1.2),
    (36.0, 1.0),
    (50.0, 1.0),
    (68.0, 1.0),
    (90.0, 1.0),
    (115.0, 0.8),
    (145.0, 0.6),
    (180.0, 0.5),
    (215.0, 0.4),
    (250.0, 0.3),
)
SEED_SCAN_FINE = tuple((p, 1.0) for p in (16.0, 18.0, 20.0, 22.0, 24.0, 26.0, 28.0, 30.0, 32.0))
GRADIENT_SCAN = tuple((g, 1.0) for g in (-1.4, -1.0, -0.6, -0.3, 0.0, 0.15, 0.3, 0.45, 0.6, 0.8, 1.0, 1.3, 1.7, 2.1))
INTENSITY_SCAN = (
    (1.6e11, 1.0),
    (1.3e11, 1.0),
    (1.0e11, 1.0),
    (7.5e10, 1.0),
    (5.5e10, 1.0),
    (4.0e10, 0.8),
    (2.5e10, 0.6),
    (1.4e10, 0.5),
    (8.0e9, 0.4),
)
# Electron-bunch seeding: (charge pC, rms length mm); the long ones seed weakly.
EBUNCH_SCAN = (
    ((180.0, 0.28), 1.2),
    ((120.0, 0.28), 1.0),
    ((60.0, 0.28), 1.0),
    ((25.0, 0.28), 1.0),
    ((8.0, 0.28), 1.0),
    ((2.0, 0.28), 0.8),
    ((0.4, 0.28), 0.6),
    ((0.12, 0.28), 0.4),
    ((180.0, 0.45), 1.0),
    ((180.0, 0.6), 0.8),
    ((180.0, 0.8), 0.6),
    ((180.0, 0.95), 0.4),
)
ION_TEST = (("helium", 4.0026, 0.6), ("hydrogen", 1.008, 0.4))  # gas, ion mass (u), share
QUAD_TRIP_SIGMA_R_MM = (0.45, 0.78, 0.92, 0.86, 0.64, 0.38)

# Proper names used anywhere in the demo data; all invented (tests check nothing else appears).
INVENTED_NAMES = frozenset({"Quillmarsh"})
