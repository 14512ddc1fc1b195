"""Deterministic generator of the invented demo campaign's shot payloads.

``generate_demo_shots(seed)`` returns about 3,000 shot bodies in the API JSON shape, in
time order. One ``numpy.random.Generator`` with a fixed seed draws everything, so the
same seed gives the same payloads on every machine.

How a shot is made: the shift calendar (scenario.PLAN) gives its local time and its
programme; the programme sets the machine (scan steps, alignment, seeding) and the
shot-to-shot jitter of each logged quantity is drawn around its set point. The true plasma
density is the calibration scale (scenario.CALIBRATION_SCALE_*) times the logged one: the
gauge sees the cell's shot-to-shot jitter but reads low, and after a set-point change it
lags for a few shots. The diagnostics are then drawn from what the closed-form model
(model.evaluate_table) gives for the true machine, so that what the pages find is what the
scenario put there:

- modulation frequency: the model's reference frequency f_ref (MODEL.md section 6) at the
  true density, with the heterodyne's resolution, so (f_meas / f_ref(logged))^2 is the
  calibration scale;
- modulation phase: the set point's phase plus the model's own sensitivities d psi / d ln x
  (model.sensitivity.wake_phase_derivatives; MODEL.md section 5) times the shot's drawn
  jitters of density, population, sigma_r and sigma_z (the sources of the phase-stability
  card's budget, app.services.phase_spread), plus the streak camera's resolution and, for a
  weak seed, a random part; the card's measured jitter is its expected one within about 10 %
  on steady running (density and bunch length the two large parts);
- halo radius: proportional to the kick-angle proxy wakefield x L / p, and witness energy:
  proportional to the gain proxy wakefield x (L - z_sat) for shots that saturate (both
  project proxies, issue 14, taken as the campaign evaluates the shot: the logged density),
  with lognormal noise and a few outliers.
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
STREAK_WINDOW_MM = 300.0  # length of bunch behind the seed that the streak camera sees
# The light-ion test ends with a few shots of the injector's slow helium setup beam (He2+ at 20 GeV/c,
# gamma = 5.5): the model takes the driver at the speed of light and flags them (SLOW_DRIVER).
SLOW_ION_SETUP_SHOTS = 2
SLOW_ION_DRIVER = {"species": "ion", "mass_amu": 4.0026, "charge_state": 2, "momentum_gev": 20.0}
# The logged inputs whose drawn jitter moves the measured phase (model.sensitivity.PHASE_JITTER_SOURCES).
PHASE_SOURCES = model.PHASE_JITTER_SOURCES
_DENSITY = "plasma.density_cm3"
_SIGMA_Z = "driver.sigma_z_mm"


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
    set_density_cm3: float = 0.0  # the cell's set point (what the gauge is regulated to)
    # Drawn shot-to-shot jitter of each phase source, as a deviation of ln x from its set point.
    jitter: dict[str, float] = field(default_factory=dict)
    scale: float = 1.0  # true / logged density (the gauge's calibration at this shot)
    first_after_step: bool = False  # the first shot after the gauge's calibration step


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
    gauge = _Gauge()
    shots = [_machine(rng, slot, gauge) for slot in slots]
    step = _local(*sc.CALIBRATION_STEP)
    next(s for s in shots if s.slot.local >= step).first_after_step = True
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


def calibration_scale(local: datetime) -> float:
    """True over logged density at a shot's time: the gauge's calibration, with its step (scenario)."""
    step = _local(*sc.CALIBRATION_STEP)
    return sc.CALIBRATION_SCALE_BEFORE if local < step else sc.CALIBRATION_SCALE_AFTER


@dataclass
class _Gauge:
    """The density gauge's set-point reading: after a fill step it settles with a time constant."""

    reading: float | None = None  # what it showed at the last shot
    at: datetime | None = None

    def read(self, set_density: float, local: datetime) -> float:
        """The set point the gauge shows at this shot (the shot-to-shot jitter comes on top)."""
        if self.reading is None or self.at is None:
            shown = set_density
        else:
            # ln(reading) relaxes towards ln(set point) as exp(-dt/tau) since the last shot.
            keep = math.exp(-(local - self.at).total_seconds() / sc.GAUGE_SETTLE_S)
            shown = set_density * (self.reading / set_density) ** keep
        self.reading, self.at = shown, local
        return shown


# --- machine --------------------------------------------------------------------------


def _sig(value: float, digits: int) -> float:
    """Round to significant digits, as the DAQ records it."""
    if value == 0:
        return 0.0
    return float(round(value, digits - 1 - int(math.floor(math.log10(abs(value))))))


def _jittered(rng: np.random.Generator, key: str, set_point: float, jitter: dict[str, float], path: str) -> float:
    """The set point with its shot-to-shot relative jitter; the deviation of ln x is kept in ``jitter``."""
    factor = 1.0 + sc.JITTER[key] * float(rng.standard_normal())
    jitter[path] = math.log(factor)
    return set_point * factor


def _machine(rng: np.random.Generator, slot: _Slot, gauge: _Gauge) -> _Shot:
    """The recorded machine of one shot (driver, plasma, seed), its true density and its drawn jitters."""
    nom = sc.NOMINAL
    programme = slot.block.programme
    jitter: dict[str, float] = {}
    driver = {
        "species": "proton",
        "momentum_gev": nom["momentum_gev"],
        "population": _jittered(rng, "population", nom["population"], jitter, "driver.population"),
        "sigma_z_mm": _jittered(rng, "sigma_z_mm", nom["sigma_z_mm"], jitter, _SIGMA_Z),
        "sigma_r_mm": _jittered(rng, "sigma_r_mm", nom["sigma_r_mm"], jitter, "driver.sigma_r_mm"),
        "emittance_n_mm_mrad": _jittered(
            rng, "emittance_n_mm_mrad", nom["emittance_n_mm_mrad"], jitter, "driver.emittance_n_mm_mrad"
        ),
        "offset_x_mm": sc.OFFSET_RMS_MM * float(rng.standard_normal()),
        "offset_y_mm": sc.OFFSET_RMS_MM * float(rng.standard_normal()),
        "angle_x_mrad": sc.ANGLE_RMS_MRAD * float(rng.standard_normal()),
        "angle_y_mrad": sc.ANGLE_RMS_MRAD * float(rng.standard_normal()),
    }
    set_density = nom["density_cm3"]
    plasma = {
        "gradient_pct_per_m": nom["gradient_pct_per_m"] + 0.005 * float(rng.standard_normal()),
        "length_m": nom["length_m"],
        "ion_mass_amu": nom["ion_mass_amu"],
        "ion_charge": 1,
    }
    seed: dict[str, Any] | None = {
        "method": "ionization_front",
        "position_mm": nom["seed_position_mm"] + sc.SEED_TIMING_RMS_MM * float(rng.standard_normal()),
    }
    density_factor = 1.0 + sc.JITTER["true_density"] * float(rng.standard_normal())
    gauge_factor = 1.0 + sc.GAUGE_NOISE * float(rng.standard_normal())
    shot = _Shot(slot=slot, driver=driver, plasma=plasma, seed=seed, true_density_cm3=0.0, tags=[programme])
    shot.witness = programme in ("production", "ion-test", "density-scan", "seed-scan", "intensity-scan") and (
        rng.random() < 0.45
    )
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
        step, set_density = _step(steps, slot)
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
        driver["population"] = _jittered(rng, "population", value, jitter, "driver.population")
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
        driver["offset_x_mm"] = recovery * float(rng.normal(0.45, 0.14))
        driver["offset_y_mm"] = recovery * float(rng.normal(-0.10, 0.08))
        driver["angle_x_mrad"] = recovery * float(rng.normal(0.12, 0.05))
        driver["angle_y_mrad"] = recovery * float(rng.normal(0.04, 0.04))
    elif programme == "quad-trip":
        driver["sigma_r_mm"] = sc.QUAD_TRIP_SIGMA_R_MM[slot.index_in_block % len(sc.QUAD_TRIP_SIGMA_R_MM)]
        driver["emittance_n_mm_mrad"] = 2.6 * (1.0 + 0.05 * float(rng.standard_normal()))
        jitter["driver.sigma_r_mm"] = 0.0
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

    # The crews regulate the cell on the gauge: the gauge shows the set point (late after a change)
    # times the cell's jitter; the true density is the calibration scale times the set point times
    # the same jitter.
    shot.scale = calibration_scale(slot.local)
    shot.set_density_cm3 = set_density
    plasma["density_cm3"] = gauge.read(set_density, slot.local) * density_factor * gauge_factor
    shot.true_density_cm3 = shot.scale * set_density * density_factor
    jitter[_DENSITY] = math.log(density_factor)
    shot.plasma = {"density_cm3": plasma.pop("density_cm3"), **plasma}
    shot.jitter = jitter
    _record_as_daq(shot)
    return shot


def _record_as_daq(shot: _Shot) -> None:
    """Round to the resolution the DAQ records (the model sees exactly these numbers)."""
    d, p = shot.driver, shot.plasma
    d["population"] = _sig(d["population"], 3)
    d["sigma_z_mm"] = round(d["sigma_z_mm"], 2)
    d["sigma_r_mm"] = round(d["sigma_r_mm"], 3)
    d["emittance_n_mm_mrad"] = round(d["emittance_n_mm_mrad"], 2)
    for key in ("offset_x_mm", "offset_y_mm"):
        d[key] = round(d[key], 3) + 0.0  # + 0.0: no "-0.0" in the record
    for key in ("angle_x_mrad", "angle_y_mrad"):
        d[key] = round(d[key], 4) + 0.0
    if not shot.bpm_read:
        for key in ("offset_x_mm", "offset_y_mm", "angle_x_mrad", "angle_y_mrad"):
            del d[key]
    p["density_cm3"] = _sig(p["density_cm3"], 5)
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


def _truth_columns(shots: Sequence[_Shot]) -> dict[str, np.ndarray]:
    """model.evaluate_table columns of the machine as it really was (the true density)."""
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
    columns[_DENSITY] = np.array([s.true_density_cm3 for s in shots])
    return columns


def _evaluate_truth(shots: Sequence[_Shot]) -> dict[str, np.ndarray]:
    """The model's outputs for the true machine, its reference frequency, wavenumbers and phase sensitivities."""
    columns = _truth_columns(shots)
    truth = dict(model.evaluate_table(columns))  # extended below with the truths the pages compare against
    # The halo and witness truths are set on the project proxies as the campaign evaluates them (the
    # logged density, density_scale 1), so the scaling checks find exactly the exponent put here.
    logged = model.evaluate_table({**columns, _DENSITY: np.array([s.plasma["density_cm3"] for s in shots])})
    truth["logged_wakefield_mv_m"] = np.nan_to_num(logged["wakefield_estimate_mv_m"])
    truth["logged_saturation_length_m"] = logged["saturation_length_m"]
    length = columns["plasma.length_m"]
    z_ref = np.where(np.isfinite(truth["saturation_length_m"]), truth["saturation_length_m"], length)
    f_p = plasma_frequency(columns[_DENSITY] * PER_CM3)
    truth["true_reference_frequency_ghz"] = (
        competing.reference_frequency(f_p, columns["plasma.gradient_pct_per_m"] * PCT, z_ref) / GHZ
    )
    # The set point's true wavenumber: the phase of the reference slice moves with it from step to step.
    set_true = np.array([s.scale * s.set_density_cm3 for s in shots])
    truth["set_wavenumber"] = plasma_wavenumber(set_true * PER_CM3)
    truth["true_wavenumber"] = plasma_wavenumber(columns[_DENSITY] * PER_CM3)
    # d psi / d ln x of the wake phase psi = k_p xi_ref - N/sqrt(3) at the reference slice xi_ref = r_ref sigma_z
    # behind the seed (model.sensitivity; the phase-stability card's budget uses the same derivatives).
    derivatives = model.wake_phase_derivatives(columns)
    kp_xi = 200.0 * truth["phase_per_pct_density_rad"]
    # Where the model has no derivative (a regime boundary), the density's is k_p xi_ref / 2 and the
    # others' (slip only) nothing.
    derivatives[_DENSITY] = np.where(np.isfinite(derivatives[_DENSITY]), derivatives[_DENSITY], kp_xi / 2.0)
    for path in PHASE_SOURCES:
        truth[f"dpsi.{path}"] = np.nan_to_num(derivatives[path])
    return truth


def _wrap(phase: float) -> float:
    return float((phase + math.pi) % (2.0 * math.pi) - math.pi)


def _lognormal(rng: np.random.Generator, width: float) -> float:
    return math.exp(width * float(rng.standard_normal()))


def _outlier(rng: np.random.Generator, low: tuple[float, float], high: tuple[float, float]) -> tuple[float, bool]:
    """(factor, reads low): a few readings are far off the truth (scenario.OUTLIER_SHARE)."""
    if rng.random() >= sc.OUTLIER_SHARE:
        return 1.0, False
    if rng.random() < 0.5:
        return float(rng.uniform(*low)), True
    return float(rng.uniform(*high)), False


def _measured(
    rng: np.random.Generator, shot: _Shot, truth: dict[str, np.ndarray], i: int
) -> tuple[dict[str, Any], str | None]:
    """Diagnostics drawn from the true machine's model outputs, and a note the crew would write, if any."""
    seed = shot.seed or {"method": "none"}
    method = seed["method"]
    sigma_z = shot.driver["sigma_z_mm"] * MM
    length = shot.plasma["length_m"]
    modulation = float(truth["modulation_exit"][i])
    modulation = modulation if math.isfinite(modulation) else 0.0
    wake_mv_m = float(truth["logged_wakefield_mv_m"][i])
    z_sat = float(truth["logged_saturation_length_m"][i])
    k_true = float(truth["true_wavenumber"][i])
    measured: dict[str, Any] = {}
    note: str | None = None

    # Heterodyne frequency: needs a developed modulation; now and then not triggered. The micro-bunch
    # train forms at z_ref, so it carries the plasma frequency there (MODEL.md section 6).
    if modulation > 0.02 and rng.random() > 0.06:
        f = float(truth["true_reference_frequency_ghz"][i]) * (
            1.0 + sc.FREQUENCY_RESOLUTION * float(rng.standard_normal())
        )
        measured["modulation_freq_ghz"] = round(f, 3)

    # Phase of the reference slice xi_ref behind the seed: the set point's k_p xi_ref (nominal sigma_z),
    # plus the model's sensitivities times this shot's jitters; random when unseeded.
    if "modulation_freq_ghz" in measured:
        if method == "none":
            measured["modulation_phase_rad"] = round(float(rng.uniform(-math.pi, math.pi)), 3)
        else:
            xi_ref = model.DEFAULT_SETTINGS["reference_slice_sigma"] * sc.NOMINAL["sigma_z_mm"] * MM
            phase = sc.PHASE_OFFSET_RAD[method] + float(truth["set_wavenumber"][i]) * xi_ref
            phase += sum(float(truth[f"dpsi.{path}"][i]) * shot.jitter.get(path, 0.0) for path in PHASE_SOURCES)
            # The noise-grown part of the modulation carries a random phase: about e^-S rad of phase
            # error at a seed S e-folds over the noise (a weak seed, WEAK_SEED, is less reproducible).
            over_noise = float(truth["seed_to_noise_efolds"][i])
            phase += min(1.0, math.exp(-over_noise)) * float(rng.standard_normal())
            phase += sc.PHASE_RESOLUTION_RAD * float(rng.standard_normal())
            measured["modulation_phase_rad"] = round(_wrap(phase), 3)

    # Micro-bunches seen on the streak camera behind the seed.
    if rng.random() > 0.12:
        zeta_s = float(seed.get("position_mm", 0.0)) * MM if method != "none" else 0.0
        window = min(zeta_s + 3.0 * sigma_z, STREAK_WINDOW_MM * MM)
        visible = max(0.0, min(1.0, modulation)) ** 0.25
        count = window * k_true / (2.0 * math.pi) * visible + 1.5 * float(rng.standard_normal())
        measured["microbunch_count"] = max(0, int(round(count)))

    # Halo of defocused protons on the screen: proportional to the kick-angle proxy, seen when it
    # clears the beam core (decided on the proxy itself, so the noise does not bias the scaling).
    halo = sc.HALO_MM_PER_PROXY * wake_mv_m * length / shot.driver["momentum_gev"]
    if halo >= sc.HALO_VISIBLE_MM and rng.random() > 0.10:
        factor, low = _outlier(rng, (0.35, 0.6), (1.8, 2.8))
        if factor != 1.0:
            note = "halo screen saturated, filter in" if low else "stray light on the halo screen"
        measured["halo_radius_mm"] = round(halo * factor * _lognormal(rng, sc.HALO_NOISE), 2)

    # Witness electrons, when the modulation saturates inside the plasma: proportional to the gain
    # proxy, the wake over the length behind the saturation point.
    if shot.witness and math.isfinite(z_sat) and z_sat < length:
        gain = sc.WITNESS_MEV_PER_PROXY * wake_mv_m * (length - z_sat)
        factor, low = _outlier(rng, (0.3, 0.6), (1.6, 2.2))
        if factor != 1.0:
            note = "witness injection timing lost for this shot" if low else "spectrometer background high"
        measured["witness_energy_mev"] = round(gain * factor * _lognormal(rng, sc.WITNESS_NOISE), 1)
    return measured, note


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


def _notes(rng: np.random.Generator, shot: _Shot, measured: dict[str, Any], f_pred_ghz: float, hint: str | None) -> str:
    slot = shot.slot
    programme = slot.block.programme
    if slot.first_in_block and programme in _FIRST_NOTES:
        return _FIRST_NOTES[programme]
    if shot.first_after_step:
        return "first beam after the access; density gauge head exchanged"
    if hint is not None:
        return hint
    if programme == "alignment" and rng.random() < 0.12:
        return _ALIGNMENT_NOTES[int(rng.integers(len(_ALIGNMENT_NOTES)))]
    f_meas = measured.get("modulation_freq_ghz")
    if f_meas is not None and abs(f_meas / f_pred_ghz - 1.0) > 0.03 and rng.random() < 0.5:
        offset = 100 * (f_meas / f_pred_ghz - 1)
        return f"f_meas {offset:+.1f} % off prediction; density gauge still settling after the fill"
    if rng.random() < 0.04:
        return _RANDOM_NOTES[int(rng.integers(len(_RANDOM_NOTES)))]
    return ""


def _payload(rng: np.random.Generator, shot: _Shot, truth: dict[str, np.ndarray], i: int) -> dict[str, Any]:
    slot = shot.slot
    measured, hint = _measured(rng, shot, truth, i)
    f_pred = float(plasma_frequency(shot.plasma["density_cm3"] * PER_CM3)) / GHZ
    taken_at = slot.local.astimezone(UTC)
    body: dict[str, Any] = {
        "shot_id": f"qm-r{slot.run}-{slot.index_in_run:04d}",
        "taken_at": taken_at.isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        "notes": _notes(rng, shot, measured, f_pred, hint),
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
