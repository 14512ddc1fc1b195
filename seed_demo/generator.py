"""Deterministic generator of the invented demo campaign's shot payloads.

``generate_demo_shots(seed)`` returns about 3,000 shot bodies in the API JSON shape, in
time order. One ``numpy.random.Generator`` with a fixed seed draws everything, so the
same seed gives the same payloads on every machine.

How a shot is made: the shift calendar (scenario.PLAN) gives its local time and its
programme; the programme sets the machine (scan steps, alignment, seeding); the "true"
plasma density differs from the recorded one by shot-to-shot jitter and, in the last
week, by the slow gauge-calibration drift. The diagnostics (modulation frequency and
phase, micro-bunch count, halo radius, witness energy) are then drawn around what the
closed-form model (model.evaluate_table) gives for the true machine, so the demo's
trends are the model's own: the phase jitters by k_p xi_ref (dn/n)/2 (MODEL.md
section 5) and the measured frequency follows the true density where the modulation forms.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, time, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

import model
from model import competing
from model.plasma import plasma_frequency, plasma_wavenumber
from model.units import GHZ, MM, PCT, PER_CM3
from seed_demo import scenario as sc
from seed_demo.scenario import Block

# Beam cycle and the shape of the bursts of shots between pauses.
CYCLE_S = 90.0
BURST_SHOTS = (5, 26)  # uniform integer range [low, high)
PAUSE_MIN = (4.0, 46.0)  # fixed part + exponential mean, minutes
SETUP_MIN = (8.0, 35.0)  # from the start of a shift to the first shot, uniform minutes
STREAK_WINDOW_MM = 150.0  # length of bunch behind the seed that the streak camera sees
HALO_DRIFT_M = 11.0  # plasma exit to the halo screen
HALO_CORE_MM = 1.2
HALO_KICK_FRACTION = 0.05  # share of the wake estimate that acts as a transverse kick
WITNESS_GAIN_FRACTION = 0.3  # share of the wake estimate a witness electron gains on average
# The light-ion test ends with a few shots of the injector's slow helium setup beam (He2+ at 20 GeV/c,
# gamma = 5.5): the model takes the driver at the speed of light and flags them (SLOW_DRIVER).
SLOW_ION_SETUP_SHOTS = 2
SLOW_ION_DRIVER = {"species": "ion", "mass_amu": 4.0026, "charge_state": 2, "momentum_gev": 20.0}


@dataclass
class _Slot:
    """One shot's place in the calendar and its programme."""

    local: datetime
    shift: str
    crew: str
    run: int
    index_in_run: int
    block: Block
    index_in_block: int
    block_size: int
    first_in_block: bool


@dataclass
class _Shot:
    slot: _Slot
    driver: dict[str, Any]
    plasma: dict[str, Any]
    seed: dict[str, Any] | None
    true_density_cm3: float
    tags: list[str] = field(default_factory=list)
    witness: bool = False
    bpm_read: bool = True


def demo_campaign_spec() -> dict[str, Any]:
    """The demo campaign's fields as the campaign service takes them (CampaignCreate)."""
    return {
        "slug": sc.CAMPAIGN_SLUG,
        "name": sc.CAMPAIGN_NAME,
        "timezone": sc.CAMPAIGN_TIMEZONE,
        "description": sc.CAMPAIGN_DESCRIPTION,
        "settings": {},
    }


def generate_demo_shots(seed: int = sc.DEMO_SEED) -> list[dict[str, Any]]:
    """The demo campaign's shot bodies (API JSON shape), in time order; deterministic in ``seed``."""
    rng = np.random.default_rng(seed)
    slots = _calendar(rng)
    shots = [_machine(rng, slot) for slot in slots]
    truth = _evaluate_truth(shots)
    return [_payload(rng, shot, truth, i) for i, shot in enumerate(shots)]


# --- calendar -------------------------------------------------------------------------


def _local(day: date, at: time) -> datetime:
    return datetime.combine(day, at, tzinfo=ZoneInfo(sc.CAMPAIGN_TIMEZONE))


def _beam_stops(day: date) -> list[tuple[datetime, datetime]]:
    return [(_local(d, a), _local(d, b)) for d, a, b in sc.BEAM_STOPS if d == day]


def _shift_times(rng: np.random.Generator, day: date, shift: str) -> list[datetime]:
    """Shot times of one shift: bursts at the beam cycle, pauses between, none in a beam stop."""
    start, end = (_local(day, t) for t in sc.SHIFTS[shift])
    stops = _beam_stops(day)
    t = start + timedelta(minutes=float(rng.uniform(*SETUP_MIN)))
    last = end - timedelta(minutes=5)
    times: list[datetime] = []
    while t < last:
        for _ in range(int(rng.integers(*BURST_SHOTS))):
            stopped = next((b for a, b in stops if a <= t < b), None)
            if stopped is not None:
                t = stopped + timedelta(minutes=float(rng.uniform(5, 15)))
                break
            if t >= last:
                break
            times.append(t + timedelta(milliseconds=int(rng.integers(0, 1000))))
            # Now and then a cycle goes without beam.
            skipped = 2 if rng.random() < 0.08 else 1
            t += timedelta(seconds=skipped * CYCLE_S + float(rng.uniform(-1.5, 1.5)))
        t += timedelta(minutes=PAUSE_MIN[0] + float(rng.exponential(PAUSE_MIN[1])))
    return times


def _calendar(rng: np.random.Generator) -> list[_Slot]:
    slots: list[_Slot] = []
    run = 100
    day_number = 0
    day = sc.CAMPAIGN_FIRST_DAY
    while day <= sc.CAMPAIGN_LAST_DAY:
        for shift, blocks in sc.PLAN.get(day, {}).items():
            crew = sc.CREWS[(2 * day_number + (0 if shift == "early" else 1)) % len(sc.CREWS)]
            times = _shift_times(rng, day, shift)
            cursor = 0
            for block in blocks:
                size = len(times) - cursor if block.shots is None else min(block.shots, len(times) - cursor)
                if size <= 0:
                    continue
                run += 1
                for k in range(size):
                    slots.append(
                        _Slot(
                            local=times[cursor + k],
                            shift=shift,
                            crew=crew,
                            run=run,
                            index_in_run=k + 1,
                            block=block,
                            index_in_block=k,
                            block_size=size,
                            first_in_block=k == 0,
                        )
                    )
                cursor += size
        day += timedelta(days=1)
        day_number += 1
    return slots


def _step(steps: Sequence[tuple[Any, float]], slot: _Slot) -> tuple[int, Any]:
    """The scan step of this shot: steps share the block by weight, in order."""
    part, parts = slot.block.options.get("part", (1, 1))
    chunk = math.ceil(len(steps) / parts)
    mine = list(steps[(part - 1) * chunk : part * chunk])
    weights = np.cumsum([w for _, w in mine])
    k = int(np.searchsorted(weights / weights[-1], (slot.index_in_block + 0.5) / slot.block_size))
    return (part - 1) * chunk + k, mine[k][0]


def _drift_fraction(local: datetime) -> float:
    """How far the true density has run ahead of the recorded one (slow gauge drift)."""
    start, end = _local(*sc.DRIFT_START), _local(*sc.DRIFT_END)
    if local <= start:
        return 0.0
    x = min(1.0, (local - start) / (end - start))
    return sc.DRIFT_END_FRACTION * x**sc.DRIFT_POWER


# --- machine --------------------------------------------------------------------------


def _sig(value: float, digits: int) -> float:
    """Round to significant digits, as the DAQ records it."""
    if value == 0:
        return 0.0
    return float(round(value, digits - 1 - int(math.floor(math.log10(abs(value))))))


def _jittered(rng: np.random.Generator, key: str) -> float:
    return sc.NOMINAL[key] * (1.0 + sc.JITTER[key] * float(rng.standard_normal()))


def _machine(rng: np.random.Generator, slot: _Slot) -> _Shot:
    """The recorded machine of one shot (driver, plasma, seed) and its true density."""
    nom = sc.NOMINAL
    programme = slot.block.programme
    driver = {
        "species": "proton",
        "momentum_gev": nom["momentum_gev"],
        "population": _jittered(rng, "population"),
        "sigma_z_mm": _jittered(rng, "sigma_z_mm"),
        "sigma_r_mm": _jittered(rng, "sigma_r_mm"),
        "emittance_n_mm_mrad": _jittered(rng, "emittance_n_mm_mrad"),
        "offset_x_mm": sc.OFFSET_RMS_MM * float(rng.standard_normal()),
        "offset_y_mm": sc.OFFSET_RMS_MM * float(rng.standard_normal()),
        "angle_x_mrad": sc.ANGLE_RMS_MRAD * float(rng.standard_normal()),
        "angle_y_mrad": sc.ANGLE_RMS_MRAD * float(rng.standard_normal()),
    }
    plasma = {
        "density_cm3": nom["density_cm3"] * (1.0 + 2e-4 * float(rng.standard_normal())),
        "gradient_pct_per_m": nom["gradient_pct_per_m"] + 0.005 * float(rng.standard_normal()),
        "length_m": nom["length_m"],
        "ion_mass_amu": nom["ion_mass_amu"],
        "ion_charge": 1,
    }
    seed: dict[str, Any] | None = {
        "method": "ionization_front",
        "position_mm": nom["seed_position_mm"] + sc.SEED_TIMING_RMS_MM * float(rng.standard_normal()),
    }
    density_jitter = sc.JITTER["true_density"] * float(rng.standard_normal())
    shot = _Shot(slot=slot, driver=driver, plasma=plasma, seed=seed, true_density_cm3=0.0, tags=[programme])
    shot.witness = programme in ("production", "ion-test") and rng.random() < 0.45
    opts = slot.block.options
    step: int | None = None

    if programme == "commissioning":
        # The seed laser is not yet timed in: the first shots self-modulate from noise.
        shot.seed = None if slot.index_in_block < 4 else {"method": "none"}
        shot.tags = ["commissioning", "unseeded"]
    elif programme == "unseeded-reference":
        shot.seed = {"method": "none"}
        shot.tags = ["unseeded-reference", "unseeded"]
        shot.bpm_read = slot.index_in_block % 4 != 3  # BPM readout off on some: offsets default to 0
    elif programme == "density-scan":
        steps = sc.DENSITY_SCAN_WIDE if opts["scan"] == "wide" else sc.DENSITY_SCAN_FINE
        step, value = _step(steps, slot)
        plasma["density_cm3"] = value * (1.0 + 2e-4 * float(rng.standard_normal()))
        shot.tags.append(f"density-scan-{opts['scan']}")
    elif programme == "seed-scan":
        steps = sc.SEED_SCAN_WIDE if opts["scan"] == "wide" else sc.SEED_SCAN_FINE
        step, value = _step(steps, slot)
        assert seed is not None
        seed["position_mm"] = value + sc.SEED_TIMING_RMS_MM * float(rng.standard_normal())
        shot.tags.append(f"seed-scan-{opts['scan']}")
    elif programme == "gradient-scan":
        step, value = _step(sc.GRADIENT_SCAN, slot)
        plasma["gradient_pct_per_m"] = value + 0.005 * float(rng.standard_normal())
    elif programme == "intensity-scan":
        step, value = _step(sc.INTENSITY_SCAN, slot)
        driver["population"] = value * (1.0 + sc.JITTER["population"] * float(rng.standard_normal()))
    elif programme == "ebunch-seed":
        if opts["scan"]:
            step, (charge, length) = _step(sc.EBUNCH_SCAN, slot)
        else:
            charge, length = nom["ebunch_charge_pc"], nom["ebunch_sigma_z_mm"]
        shot.seed = {
            "method": "electron_bunch",
            "position_mm": nom["ebunch_position_mm"] + sc.SEED_TIMING_RMS_MM * float(rng.standard_normal()),
            "electron_charge_pc": charge * (1.0 + sc.JITTER["ebunch_charge_pc"] * float(rng.standard_normal())),
            "electron_sigma_z_mm": length * (1.0 + 0.03 * float(rng.standard_normal())),
            "electron_sigma_r_mm": nom["ebunch_sigma_r_mm"] * (1.0 + 0.03 * float(rng.standard_normal())),
        }
        shot.tags = ["ebunch-seed"] + (["ebunch-scan"] if opts["scan"] else [])
    elif programme == "alignment":
        # After a magnet intervention the trajectory is off; the late shift steers it back.
        progress = slot.index_in_block / max(1, slot.block_size - 1)
        recovery = max(0.12, 1.0 - 1.8 * progress) if opts["recovery"] else 1.0
        driver["offset_x_mm"] = recovery * float(rng.normal(0.22, 0.07))
        driver["offset_y_mm"] = recovery * float(rng.normal(-0.05, 0.04))
        driver["angle_x_mrad"] = recovery * float(rng.normal(0.09, 0.04))
        driver["angle_y_mrad"] = recovery * float(rng.normal(0.03, 0.03))
    elif programme == "quad-trip":
        driver["sigma_r_mm"] = sc.QUAD_TRIP_SIGMA_R_MM[slot.index_in_block % len(sc.QUAD_TRIP_SIGMA_R_MM)]
        driver["emittance_n_mm_mrad"] = 2.4 * (1.0 + 0.05 * float(rng.standard_normal()))
    elif programme == "ion-test":
        shares = np.cumsum([share for _, _, share in sc.ION_TEST])
        gas, mass, _ = sc.ION_TEST[int(np.searchsorted(shares, (slot.index_in_block + 0.5) / slot.block_size))]
        plasma["ion_mass_amu"] = mass
        shot.tags.append(f"gas-{gas}")
        if slot.index_in_block >= slot.block_size - SLOW_ION_SETUP_SHOTS:
            driver.update(SLOW_ION_DRIVER)
            shot.tags.append("slow-ion-setup-beam")
    if step is not None:
        shot.tags.append(f"step-{step + 1:02d}")
    if shot.witness:
        shot.tags.append("witness")

    shot.true_density_cm3 = plasma["density_cm3"] * (1.0 + _drift_fraction(slot.local)) * (1.0 + density_jitter)
    _record_as_daq(shot)
    return shot


def _record_as_daq(shot: _Shot) -> None:
    """Round to the resolution the DAQ records (the model sees exactly these numbers)."""
    d, p = shot.driver, shot.plasma
    d["population"] = _sig(d["population"], 3)
    d["sigma_z_mm"] = round(d["sigma_z_mm"], 1)
    d["sigma_r_mm"] = round(d["sigma_r_mm"], 3)
    d["emittance_n_mm_mrad"] = round(d["emittance_n_mm_mrad"], 2)
    for key in ("offset_x_mm", "offset_y_mm"):
        d[key] = round(d[key], 3) + 0.0  # + 0.0: no "-0.0" in the record
    for key in ("angle_x_mrad", "angle_y_mrad"):
        d[key] = round(d[key], 4) + 0.0
    if not shot.bpm_read:
        for key in ("offset_x_mm", "offset_y_mm", "angle_x_mrad", "angle_y_mrad"):
            del d[key]
    p["density_cm3"] = _sig(p["density_cm3"], 4)
    p["gradient_pct_per_m"] = round(p["gradient_pct_per_m"], 3)
    if shot.seed is not None:
        s = shot.seed
        if "position_mm" in s:
            s["position_mm"] = round(s["position_mm"], 2)
        if "electron_charge_pc" in s:
            s["electron_charge_pc"] = _sig(s["electron_charge_pc"], 3)
            s["electron_sigma_z_mm"] = round(s["electron_sigma_z_mm"], 3)
            s["electron_sigma_r_mm"] = round(s["electron_sigma_r_mm"], 3)


# --- truth and diagnostics ------------------------------------------------------------


def _evaluate_truth(shots: Sequence[_Shot]) -> dict[str, np.ndarray]:
    """The model's outputs for the machine as it really was (true density, no drift in the record)."""
    columns: dict[str, np.ndarray] = {}
    for spec in model.INPUT_FIELDS:
        section, key = spec.path.split(".")
        if section == "measured":
            continue
        values = [(getattr(s, section) or {}).get(key, spec.default) for s in shots]
        if spec.kind == "enum":
            columns[spec.path] = np.array(values, dtype=object)
        else:
            columns[spec.path] = np.array([np.nan if v is None else float(v) for v in values])
    columns["plasma.density_cm3"] = np.array([s.true_density_cm3 for s in shots])
    truth = model.evaluate_table(columns)
    truth["true_frequency_ghz"] = plasma_frequency(columns["plasma.density_cm3"] * PER_CM3) / GHZ
    truth["true_wavenumber"] = plasma_wavenumber(columns["plasma.density_cm3"] * PER_CM3)
    recorded = np.array([s.plasma["density_cm3"] for s in shots])
    truth["recorded_wavenumber"] = plasma_wavenumber(recorded * PER_CM3)
    return truth


def _wrap(phase: float) -> float:
    return float((phase + math.pi) % (2.0 * math.pi) - math.pi)


def _measured(rng: np.random.Generator, shot: _Shot, truth: dict[str, np.ndarray], i: int) -> dict[str, Any]:
    """Diagnostics drawn around the true machine's model outputs."""
    seed = shot.seed or {"method": "none"}
    method = seed["method"]
    sigma_z = shot.driver["sigma_z_mm"] * MM
    length = shot.plasma["length_m"]
    modulation = float(np.nan_to_num(truth["modulation_exit"][i]))
    wake_v_m = float(np.nan_to_num(truth["wakefield_estimate_mv_m"][i])) * 1e6
    z_sat = float(truth["saturation_length_m"][i])
    z_ref = z_sat if math.isfinite(z_sat) else length
    momentum_ev = shot.driver["momentum_gev"] * 1e9
    k_true, k_rec = float(truth["true_wavenumber"][i]), float(truth["recorded_wavenumber"][i])
    measured: dict[str, Any] = {}

    # Heterodyne frequency: needs a developed modulation; now and then not triggered. The micro-bunch
    # train forms at z_ref, so it carries the plasma frequency there (MODEL.md section 6).
    if modulation > 0.02 and rng.random() > 0.06:
        gradient = shot.plasma["gradient_pct_per_m"] * PCT
        f_ref = float(competing.reference_frequency(float(truth["true_frequency_ghz"][i]), gradient, z_ref))
        f = f_ref * (1.0 + sc.FREQUENCY_RESOLUTION * float(rng.standard_normal()))
        measured["modulation_freq_ghz"] = round(f, 2)

    # Phase of the reference slice (xi_ref = sigma_z behind the seed): calibrated at the
    # recorded density, it moves by (k_true - k_rec) xi_ref; random when unseeded.
    phase_error = (k_true - k_rec) * sigma_z
    if "modulation_freq_ghz" in measured:
        if method == "none":
            measured["modulation_phase_rad"] = round(float(rng.uniform(-math.pi, math.pi)), 3)
        else:
            offset = sc.PHASE_CALIBRATION_RAD if method == "ionization_front" else -0.4
            noise = sc.PHASE_RESOLUTION_RAD * float(rng.standard_normal())
            measured["modulation_phase_rad"] = round(_wrap(offset + phase_error + noise), 3)

    # Micro-bunches seen on the streak camera behind the seed.
    if rng.random() > 0.12:
        zeta_s = float(seed.get("position_mm", 0.0)) * MM if method != "none" else 0.0
        window = min(zeta_s + 3.0 * sigma_z, STREAK_WINDOW_MM * MM)
        visible = max(0.0, min(1.0, modulation)) ** 0.25
        count = window * k_true / (2.0 * math.pi) * visible + 1.5 * float(rng.standard_normal())
        measured["microbunch_count"] = max(0, int(round(count)))

    # Halo of defocused protons on the screen after the plasma.
    if rng.random() > 0.10:
        kick_length = max(length - z_ref, 0.2 * length) * min(1.0, modulation)
        angle = HALO_KICK_FRACTION * wake_v_m * kick_length / momentum_ev
        radius = (HALO_CORE_MM + HALO_DRIFT_M * angle / MM) * (1.0 + 0.06 * float(rng.standard_normal()))
        measured["halo_radius_mm"] = round(max(radius, 0.3), 2)

    # Witness electrons: gain follows the wake and drops when the phase walks off.
    if shot.witness:
        gain_mev = WITNESS_GAIN_FRACTION * wake_v_m / 1e6 * max(length - z_ref, 0.2 * length)
        gain_mev *= max(0.15, math.cos(phase_error)) * (1.0 + 0.04 * float(rng.standard_normal()))
        measured["witness_energy_mev"] = round(sc.NOMINAL["witness_injection_mev"] + max(gain_mev, 0.0), 1)
    return measured


# --- notes and payload ----------------------------------------------------------------

_FIRST_NOTES = {
    "commissioning": "first beam of the campaign; seed laser timing not yet set",
    "density-scan": "start density scan (cell fill steps)",
    "seed-scan": "start seed position scan",
    "gradient-scan": "start gradient scan; cell end temperatures adjusted per step",
    "intensity-scan": "bunch population scan requested from the injector",
    "ebunch-seed": "cell pre-ionised; electron bunch seeds ahead of the proton bunch",
    "alignment": "trajectory off after magnet intervention, <b>check BPM</b> readings",
    "quad-trip": "focusing quad tripped & reset; beam size jumped",
    "ion-test": "light-ion test: cell filled with light gas",
    "unseeded-reference": "seed laser blocked on purpose: unseeded reference shots",
}
_RANDOM_NOTES = (
    "stable",
    "streak camera gain changed",
    "witness timing tweaked by 2 ps",
    "heterodyne receiver re-armed",
    "laser energy 3 % low",
    "OTR screen 2 in",
    "<b>check BPM</b> 3, reading jumps",
    "vacuum spike upstream, recovered",
    "cell temperature settled",
    "DAQ restarted <i>no data lost</i>",
    "seed <-> bunch timing ok",
    "n_e > target? compare with interferometer",
    "halo screen saturated, filter in",
)
_ALIGNMENT_NOTES = (
    "<b>check BPM</b>",
    "offset x > 0.1 mm",
    "steering by hand",
    "angle still large & drifting",
    "centroid oscillation visible on screen",
)


def _notes(rng: np.random.Generator, shot: _Shot, measured: dict[str, Any], f_pred_ghz: float) -> str:
    slot = shot.slot
    programme = slot.block.programme
    if slot.first_in_block and programme in _FIRST_NOTES:
        return _FIRST_NOTES[programme]
    if programme == "alignment" and rng.random() < 0.12:
        return _ALIGNMENT_NOTES[int(rng.integers(len(_ALIGNMENT_NOTES)))]
    f_meas = measured.get("modulation_freq_ghz")
    if f_meas is not None and f_meas / f_pred_ghz - 1.0 > 0.03 and rng.random() < 0.15:
        return f"f_meas {100 * (f_meas / f_pred_ghz - 1):.1f} % above prediction; density gauge recalibration requested"
    if rng.random() < 0.04:
        return _RANDOM_NOTES[int(rng.integers(len(_RANDOM_NOTES)))]
    return ""


def _payload(rng: np.random.Generator, shot: _Shot, truth: dict[str, np.ndarray], i: int) -> dict[str, Any]:
    slot = shot.slot
    measured = _measured(rng, shot, truth, i)
    f_pred = float(plasma_frequency(shot.plasma["density_cm3"] * PER_CM3)) / GHZ
    taken_at = slot.local.astimezone(UTC)
    body: dict[str, Any] = {
        "shot_id": f"qm-r{slot.run}-{slot.index_in_run:04d}",
        "taken_at": taken_at.isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        "notes": _notes(rng, shot, measured, f_pred),
        "tags": shot.tags,
        "driver": shot.driver,
        "plasma": shot.plasma,
    }
    if shot.seed is not None:
        body["seed"] = shot.seed
    if measured:
        body["measured"] = measured
    # Not part of the model's inputs: kept verbatim in the raw payload.
    body["daq"] = {"run": slot.run, "crew": slot.crew, "shift": slot.shift}
    return body
