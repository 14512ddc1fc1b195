"""The invented demo campaign: a fictional facility, its calendar, programme and machine.

Nothing here describes a real facility, experiment, laboratory or person, and the
machine numbers are our own: invented, physical for a long proton bunch in a laser-ionised
gas column, and deliberately in a corner of parameter space of their own (a 58 GeV/c
driver, a 190 mm bunch, a 17 m argon column, densities in the 1e13 cm^-3 decade). The
calendar is fixed so that the demo is the same on every machine: three ISO weeks, 2026-W46
to 2026-W48, in the campaign's local time zone.
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
    f"{CAMPAIGN_TIMEZONE}). a 58 GeV/c proton bunch 190 mm long (rms) is seeded by an "
    "ionisation front in a 17 m laser-ionised argon column at about 2.4e13 cm^-3; the "
    "programme has density, seed-position, gradient and bunch-population scans, an "
    "electron-bunch seeding test, a day of poor alignment and a light-ion test. the density "
    "gauge reads about 1.5 % low, and about 3 % low after its head is exchanged in the "
    "access of wednesday 18 november. the facility, its machine numbers and its crews are made up."
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
    # After the gauge exchange: unseeded reference shots again, and the gradient scan repeated.
    _d(25): {"early": (Block("production"),), "late": (Block("unseeded-reference", 25), Block("production"))},
    _d(26): {"early": (Block("seed-scan", options={"scan": "fine"}),), "late": (Block("gradient-scan"),)},
    _d(27): {"early": (Block("ebunch-seed", options={"scan": False}),), "late": (Block("production"),)},
    _d(28): {"early": (Block("production"),)},
}

# Beam interruptions inside a shift (local date, start, end): no shots then.
BEAM_STOPS: tuple[tuple[date, time, time], ...] = (
    (_d(12), time(17, 10), time(19, 40)),  # injector fault
    (_d(20), time(9, 30), time(10, 50)),  # cell heater interlock
    (_d(25), time(15, 0), time(16, 20)),  # cooling water alarm
)

# The density diagnostic's calibration (the invented truth the model-vs-measurement figures
# should find): the gauge reads low, so the true density is CALIBRATION_SCALE_BEFORE times the
# logged one; during the maintenance access of Wednesday 18 November the gauge head is exchanged
# and from the first beam after it (the late shift) it reads lower still, CALIBRATION_SCALE_AFTER.
# The crews regulate the cell on the gauge, so the logged density stays at the set point and the
# true density (what the modulation frequency and phase follow) is scale x logged.
CALIBRATION_SCALE_BEFORE = 1.015
CALIBRATION_SCALE_AFTER = 1.030
CALIBRATION_STEP = (_d(18), time(14, 0))
GAUGE_NOISE = 2e-4  # relative rms of the gauge reading on top of the true shot-to-shot jitter
# After a fill step the gauge's range filter settles: ln(reading) relaxes to the new set point
# as exp(-t/GAUGE_SETTLE_S), so the first shots after a large step of the wide density scan
# log a density between the old and the new one (DENSITY_MISMATCH fires on them).
GAUGE_SETTLE_S = 50.0

# The machine: invented nominal values and shot-to-shot relative jitter (rms). The corner:
# a 58 GeV/c proton bunch 190 mm long (rms) in a 17 m laser-ionised argon column at
# 2.4e13 cm^-3 (lambda_p 6.8 mm, sigma_z/lambda_p 28, k_p sigma_r 0.44): the nominal shot
# grows from the seed (7 e-folds over the noise) and saturates about 5 m into the plasma.
NOMINAL: dict[str, float] = {
    "momentum_gev": 58.0,
    "population": 2.6e11,
    "sigma_z_mm": 190.0,
    "sigma_r_mm": 0.48,
    "emittance_n_mm_mrad": 1.7,
    "density_cm3": 2.4e13,
    "gradient_pct_per_m": 0.10,
    "length_m": 17.0,
    "ion_mass_amu": 39.948,  # argon
    "seed_position_mm": 75.0,
    "ebunch_position_mm": 420.0,
    "ebunch_charge_pc": 400.0,
    "ebunch_sigma_z_mm": 0.6,
    "ebunch_sigma_r_mm": 0.45,
}
JITTER: dict[str, float] = {
    "population": 0.03,
    "sigma_z_mm": 0.001,  # a well-stabilised ring: k_p xi_ref ~ 175 rad makes sigma_z a large phase source
    "sigma_r_mm": 0.02,
    "emittance_n_mm_mrad": 0.04,
    "ebunch_charge_pc": 0.05,
    "true_density": 0.0030,  # shot-to-shot density jitter of the cell (the gauge sees it)
}
# Absolute rms jitter of alignment and timing.
OFFSET_RMS_MM = 0.025
ANGLE_RMS_MRAD = 0.008
SEED_TIMING_RMS_MM = 0.6
FREQUENCY_RESOLUTION = 0.0008  # relative rms of the heterodyne frequency measurement
PHASE_RESOLUTION_RAD = 0.05
# Phase offset of the reference slice per seed method (the streak camera is timed on the seed).
PHASE_OFFSET_RAD = {"ionization_front": 0.9, "electron_bunch": -0.4}

# Halo and witness (the invented truths of the scaling checks): the halo radius on the screen is
# HALO_MM_PER_PROXY x the kick-angle proxy wakefield [MV/m] x L [m] / p [GeV/c] (a project proxy),
# recorded when it clears the beam core; the witness energy is WITNESS_MEV_PER_PROXY x the gain
# proxy wakefield [MV/m] x (L - z_sat) [m] for shots that saturate. Both with lognormal noise and
# a few outliers (a saturated screen, stray light, lost injection timing, spectrometer background).
HALO_MM_PER_PROXY = 0.55
HALO_NOISE = 0.06
HALO_VISIBLE_MM = 1.5
WITNESS_MEV_PER_PROXY = 0.30
WITNESS_NOISE = 0.04
OUTLIER_SHARE = 0.005

# Scans: step values, and relative weights (shots per step).
DENSITY_SCAN_WIDE = (
    (1.2e11, 0.3),
    (3.5e11, 0.3),
    (9.0e11, 0.5),
    (2.0e12, 0.8),
    (4.0e12, 1.0),
    (7.0e12, 1.0),
    (1.1e13, 1.0),
    (1.6e13, 1.0),
    (2.0e13, 1.0),
    (2.4e13, 1.2),
    (3.0e13, 1.0),
    (4.0e13, 1.0),
    (6.0e13, 1.0),
    (1.0e14, 1.0),
    (2.2e14, 0.8),
    (6.0e14, 0.6),
    (1.4e15, 0.5),
)
DENSITY_SCAN_FINE = tuple((2.4e13 * f, 1.0) for f in (0.90, 0.93, 0.96, 0.98, 1.0, 1.02, 1.04, 1.07, 1.10))
SEED_SCAN_WIDE = (
    (-160.0, 1.0),
    (-90.0, 1.0),
    (-35.0, 1.0),
    (0.0, 1.0),
    (40.0, 1.0),
    (75.0, 1.2),
    (115.0, 1.0),
    (160.0, 1.0),
    (220.0, 1.0),
    (290.0, 1.0),
    (370.0, 0.8),
    (460.0, 0.6),
    (560.0, 0.5),
    (660.0, 0.4),
    (760.0, 0.3),
)
SEED_SCAN_FINE = tuple((p, 1.0) for p in (55.0, 60.0, 65.0, 70.0, 75.0, 80.0, 85.0, 90.0, 95.0))
GRADIENT_SCAN = tuple(
    (g, 1.0) for g in (-1.2, -0.9, -0.6, -0.35, -0.15, 0.0, 0.1, 0.2, 0.35, 0.5, 0.7, 0.95, 1.25, 1.6)
)
INTENSITY_SCAN = (
    (3.0e11, 1.0),
    (2.3e11, 1.0),
    (1.7e11, 1.0),
    (1.2e11, 1.0),
    (8.5e10, 1.0),
    (6.0e10, 0.8),
    (4.0e10, 0.6),
    (2.5e10, 0.5),
    (1.5e10, 0.4),
)
# Electron-bunch seeding: (charge pC, rms length mm); the weak and the long ones seed weakly.
EBUNCH_SCAN = (
    ((400.0, 0.6), 1.2),
    ((250.0, 0.6), 1.0),
    ((120.0, 0.6), 1.0),
    ((50.0, 0.6), 1.0),
    ((15.0, 0.6), 1.0),
    ((4.0, 0.6), 0.8),
    ((1.0, 0.6), 0.6),
    ((0.3, 0.6), 0.4),
    ((400.0, 1.2), 1.0),
    ((400.0, 1.8), 0.8),
    ((400.0, 2.4), 0.6),
    ((400.0, 3.0), 0.4),
)
ION_TEST = (("helium", 4.0026, 0.5), ("hydrogen", 1.008, 0.5))  # gas, ion mass (u), share
QUAD_TRIP_SIGMA_R_MM = (1.0, 1.7, 2.0, 1.85, 1.4, 0.85)

# Proper names used anywhere in the demo data; all invented (tests check nothing else appears).
INVENTED_NAMES = frozenset({"Quillmarsh"})
