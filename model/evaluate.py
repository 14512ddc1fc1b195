"""evaluate_table and evaluate_shot: the closed-form shot model, one vectorised core.

evaluate_table(columns, settings) -> dict of numpy arrays:
- every name of OUTPUT_NAMES (MODEL.md section 8 order) as a float array, NaN for null;
- "status": int8 status ranks, indices into model.STATUSES (0 nominal, 1 marginal, 2 outside);
- for each code of FLAG_CODES: "flag.<CODE>" (int8 severity ranks, indices into
  model.SEVERITY_BY_RANK: 0 not fired, 1 info, 2 marginal, 3 outside),
  "flag_value.<CODE>" and "flag_limit.<CODE>" (float arrays, NaN where not fired or
  where the flag has no metric/limit, i.e. UNSEEDED).
Ranks stay numbers inside; they become text only at the edge (evaluate_shot, the store).
evaluate_shot(shot, settings) builds a 1-row table, runs the same core and unpacks it
(NaN -> None, flags as a list of {code, severity, value, limit, message}).

The core runs on cache-sized chunks of rows and writes every output straight into its
slice of the result table; columns are validated once (a ValidatedColumns from
validate_columns is taken as it is).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import constants as _c

from model import competing, growth, phase, plasma, seed
from model import form_factors as ff
from model import units as U
from model.inputs import ValidatedColumns, clean_shot_columns, validate_columns
from model.rules import ABS_METRIC_CODES, FLAG_CODES, RULES, RULES_BY_CODE, flag_message, resolve_settings
from model.vocabulary import OUTPUT_NAMES, SEED_METHODS, SEVERITY_BY_RANK, STATUSES

MODEL_VERSION = "2026.12.2"

_CHUNK = 8192  # rows per pass: the temporaries stay in the core's cache
_FRONT = SEED_METHODS.index("ionization_front")
_ELECTRON_BUNCH = SEED_METHODS.index("electron_bunch")
_UNSEEDED = SEED_METHODS.index("none")
_LOG_MODULATION_EXIT = "_log_modulation_exit"  # unclipped ln delta(L), for the growth curves


def _core(
    cols: Mapping[str, np.ndarray],
    species: np.ndarray,
    method: np.ndarray,
    s: Mapping[str, Any],
    out: Mapping[str, np.ndarray],
) -> None:
    """All section-2..6 outputs of validated rows (API units in, output units out; SI between), written into `out`."""

    def put(name: str, value: Any, scale: float = 1.0) -> None:
        """Write an output (times its unit scale) straight into its slice of the result."""
        dest = out.get(name)
        if dest is not None:
            np.multiply(value, scale, out=dest)

    # Section 2: plasma and beam.
    n0 = plasma.plasma_density_m3(cols["plasma.density_cm3"], s)
    omega_p = plasma.plasma_angular_frequency(n0)
    kp = omega_p * (1.0 / _c.c)
    e0 = plasma.wavebreaking_field(n0)
    f_p = omega_p * (1.0 / (2.0 * np.pi))
    mass, charge = seed.driver_mass_and_charge(species, cols["driver.mass_amu"], cols["driver.charge_state"])
    abs_charge = np.abs(charge)
    momentum = cols["driver.momentum_gev"] * U.GEV_PER_C
    gamma = plasma.lorentz_factor(momentum, mass)
    population = cols["driver.population"]
    sigma_z = cols["driver.sigma_z_mm"] * U.MM
    sigma_r = cols["driver.sigma_r_mm"] * U.MM
    length = cols["plasma.length_m"]
    nb0 = plasma.peak_beam_density(population, sigma_r, sigma_z)
    kp_sigma_r = kp * sigma_r
    u = kp_sigma_r * kp_sigma_r
    on_axis, seed_factor, growth_factor = ff.driver_slice_factors(u)  # (k_p sigma_r)^2 R(a), H(u), F(u)
    eps_g = plasma.geometric_emittance(cols["driver.emittance_n_mm_mrad"] * U.MM_MRAD, momentum, mass)

    put("plasma_frequency_ghz", f_p, 1.0 / U.GHZ)
    put("plasma_wavelength_mm", (2.0 * np.pi / U.MM) / kp)
    put("skin_depth_mm", 1.0 / kp, 1.0 / U.MM)
    put("wavebreaking_field_gv_m", e0, 1.0 / U.GV_PER_M)
    put("lorentz_gamma", gamma)
    put("peak_beam_density_cm3", nb0, 1.0 / U.PER_CM3)
    put("density_ratio", abs_charge * nb0 / n0)
    put("kp_sigma_r", kp_sigma_r)
    put("bunch_length_over_plasma_wavelength", sigma_z * kp, 1.0 / (2.0 * np.pi))
    put("geometric_emittance_nm", eps_g, 1.0 / U.NM)
    put("waist_beta_m", np.where(eps_g > 0.0, plasma.waist_beta_function(sigma_r, eps_g), np.nan))

    # Section 3: seed (in logarithms: a Gaussian tail can underflow), noise, seed forces. Row subsets by seed
    # method, not np.where over every row: the cheaper way in numpy.
    front = np.flatnonzero(method == _FRONT)
    unseeded = np.flatnonzero(method == _UNSEEDED)
    zeta_s = cols["seed.position_mm"] * U.MM
    zeta_s[unseeded] = 0.0  # unseeded: the reference slice is placed behind the centre
    field_per_density = seed.cut_field_per_density(kp, charge, on_axis)
    log_n_seed = seed.log_ionization_front_seed_density(nb0, zeta_s, sigma_z)
    bunch = np.flatnonzero(method == _ELECTRON_BUNCH)
    if bunch.size:
        kp_sigma_r_seed = kp[bunch] * (cols["seed.electron_sigma_r_mm"][bunch] * U.MM)
        u_seed = kp_sigma_r_seed * kp_sigma_r_seed
        seed_on_axis = ff.driver_slice_factors(u_seed)[0] / u_seed  # R((k_p sigma_rs)^2/2)
        log_field = seed.log_electron_bunch_seed_field(
            cols["seed.electron_charge_pc"][bunch] * U.PC,
            cols["seed.electron_sigma_z_mm"][bunch] * U.MM,
            kp[bunch],
            seed_on_axis,
        )
        log_n_seed[bunch] = seed.log_equivalent_cut_density(log_field, field_per_density[bunch])
    log_n_seed[unseeded] = -np.inf
    n_seed = np.exp(log_n_seed)
    put("seed_density_cm3", n_seed, 1.0 / U.PER_CM3)
    put("seed_field_mv_m", n_seed * field_per_density, 1.0 / U.MV_PER_M)
    xi_ref = s["reference_slice_sigma"] * sigma_z
    zeta_ref = zeta_s - xi_ref
    n_ref, line_ref = seed.slice_densities(nb0, population, zeta_ref, sigma_z)
    eta = seed.relative_noise(line_ref, kp, s["noise_floor"])
    coupling_per_density = growth.coupling_per_density(charge, gamma, mass, n0)
    log_force_per_density = seed.log_seed_force_per_density(kp, coupling_per_density, seed_factor)
    log_force_noise = log_force_per_density + np.log(eta * n_ref)
    log_force_reported = log_force_per_density + log_n_seed  # the seeded mode, or noise where unseeded
    log_force_reported[unseeded] = log_force_noise[unseeded]

    # Section 4: growth of the seeded mode from the seed, of noise from where the plasma meets the bunch
    # (the front, or the head of the bunch in a preformed plasma).
    from_seed, from_head = growth.gaussian_profile_integrals(zeta_s, zeta_ref, sigma_z)
    coupling_scale = growth.integrated_coupling(kp, coupling_per_density, nb0, 1.0, growth_factor)
    coupling_reported = coupling_scale * from_seed
    coupling_noise = coupling_scale * from_head
    coupling_noise[front] = coupling_reported[front]
    coupling_reported[unseeded] = coupling_noise[unseeded]
    log_sat = math.log(s["saturation_modulation"])
    saturated, log_delta_exit, z_ref, n_exit, n_ref_efolds, seed_over_noise = growth.growth_to_saturation(
        log_force_reported, coupling_reported, log_force_noise, coupling_noise, length, log_sat
    )
    modulation = np.exp(np.minimum(log_delta_exit, log_sat))
    np.copyto(modulation, s["saturation_modulation"], where=saturated)
    kp_xi = kp * xi_ref
    wakefield = growth.wakefield_estimate(e0, abs_charge * n_ref / n0, on_axis, kp_xi, n_ref_efolds, modulation)
    hosing_scale = growth.hosing_efolds_ratio(seed_factor, growth_factor)
    seed_over_noise[unseeded] = np.nan
    put("seed_to_noise_efolds", seed_over_noise)
    put("efolds_exit", n_exit)
    put("modulation_exit", modulation)
    put("growth_margin_efolds", log_delta_exit - log_sat)
    put("saturation_length_m", np.where(saturated, z_ref, np.nan))  # null where not saturated
    put("wakefield_estimate_mv_m", wakefield, 1.0 / U.MV_PER_M)
    put("hosing_efolds_exit", n_exit * hosing_scale)
    put("asymptotic_validity", n_exit / kp_xi)
    put(_LOG_MODULATION_EXIT, log_delta_exit)

    # Section 5: phase.
    gradient = cols["plasma.gradient_pct_per_m"] * U.PCT
    put("phase_slip_rad", phase.phase_slip(n_ref_efolds))
    put("phase_velocity_deficit", phase.phase_velocity_deficit(n_ref_efolds, kp, z_ref))
    put("phase_per_pct_density_rad", phase.phase_per_pct_density(kp, xi_ref))
    put("density_tolerance_pct", phase.density_tolerance_pct(kp, xi_ref, s["phase_tolerance_rad"]))
    put("compensating_gradient_pct_per_m", phase.compensating_gradient_pct_per_m(n_ref_efolds, kp, xi_ref, z_ref))
    put("gradient_phase_error_rad", phase.gradient_phase_error(kp, xi_ref, gradient, length, n_ref_efolds))

    # Section 6: competing effects and the measured frequency.
    ox, oy = cols["driver.offset_x_mm"], cols["driver.offset_y_mm"]
    ax, ay = cols["driver.angle_x_mrad"], cols["driver.angle_y_mrad"]
    offset = np.sqrt(ox * ox + oy * oy) * U.MM  # |x| <= 100 mm: no overflow, so no need for hypot
    angle = np.sqrt(ax * ax + ay * ay) * U.MRAD
    x_eff = competing.effective_offset(offset, angle, z_ref)
    put("hosing_ratio", competing.hosing_ratio(x_eff, sigma_r, n_seed, n_ref, eta, n_ref_efolds, hosing_scale))
    ion_mass = cols["plasma.ion_mass_amu"] * plasma.ATOMIC_MASS
    put("ion_motion_index", competing.ion_motion_index(cols["plasma.ion_charge"], ion_mass, wakefield, e0, kp, xi_ref))
    put("divergence_ratio", competing.divergence_ratio(z_ref, eps_g, sigma_r))
    f_meas = cols["measured.modulation_freq_ghz"] * U.GHZ  # NaN where not measured
    f_ref = competing.reference_frequency(f_p, gradient, z_ref)
    put("frequency_mismatch_pct", 100.0 * competing.frequency_mismatch(f_meas, f_ref))
    put("implied_density_cm3", competing.implied_density(n0, f_meas, f_ref), 1.0 / U.PER_CM3)


@dataclass(frozen=True)
class _Grading:
    """The rules with limits as one matrix, rows in _MATRIX order (the graded rules, then ASYMPTOTIC_LIMIT), signed so
    that every row fires above its limits: an "above" rule as it is, a "below" one negated."""

    metric_rows: np.ndarray  # row of each rule's metric in the float block
    absolute: np.ndarray  # rows (of the matrix) whose metric is taken as |metric|
    sign: np.ndarray  # (rules, 1): +1 for "above" (and info), -1 for "below"
    marginal: np.ndarray  # (rules, 1): the marginal limit; ASYMPTOTIC_LIMIT's info limit
    outside: np.ndarray  # (rules, 1): the outside limit; +inf for ASYMPTOTIC_LIMIT (never outside)


def _grading(s: Mapping[str, Any]) -> _Grading:
    rules = [RULES_BY_CODE[code] for code in _MATRIX]
    limits = [s["limits"][code] for code in _MATRIX]
    return _Grading(
        metric_rows=np.array([_FLOAT_ROW[r.metric] for r in rules]),
        absolute=np.array([i for i, code in enumerate(_MATRIX) if code in ABS_METRIC_CODES], dtype=np.intp),
        sign=np.array([[-1.0] if r.bad_when == "below" else [1.0] for r in rules]),
        marginal=np.array([[lim.get("marginal", lim.get("info"))] for lim in limits]),
        outside=np.array([[lim.get("outside", np.inf)] for lim in limits]),
    )


def _apply_rules(floats: np.ndarray, ranks: np.ndarray, method: np.ndarray, grading: _Grading) -> None:
    """Severity rank (0 none, 1 info, 2 marginal, 3 outside), value and limit of every rule, and the status rank, into
    a chunk of the two result blocks (MODEL.md section 7); the rules with limits all at once, as one matrix."""
    k = len(_MATRIX)
    metric = floats[grading.metric_rows]
    if grading.absolute.size:
        metric[grading.absolute] = np.abs(metric[grading.absolute])
    with np.errstate(invalid="ignore"):
        signed = metric * grading.sign
        # validated order: past the outside limit implies past the marginal one
        marginal = signed > grading.sign * grading.marginal
        outside = signed > grading.sign * grading.outside
    rank = ranks[:k]
    np.add(marginal.view(np.int8), marginal.view(np.int8), out=rank)
    rank += outside.view(np.int8)
    rank[k - 1] = marginal[k - 1]  # ASYMPTOTIC_LIMIT fires as info (rank 1), which never changes the status
    # Values and limits are NaN where a rule did not fire: times fired/fired, which is 1 there and 0/0 elsewhere.
    nan_unless_fired = marginal.astype(float)
    with np.errstate(invalid="ignore"):
        np.divide(nan_unless_fired, nan_unless_fired, out=nan_unless_fired)
    np.multiply(metric, nan_unless_fired, out=floats[_VALUE_ROW0 : _VALUE_ROW0 + k])
    limit = np.where(outside, grading.outside, grading.marginal)
    np.multiply(limit, nan_unless_fired, out=floats[_LIMIT_ROW0 : _LIMIT_ROW0 + k])
    # UNSEEDED: marginal whenever unseeded, with no value or limit
    unseeded = ranks[_RANK_ROW["flag.UNSEEDED"]]
    np.multiply(method == _UNSEEDED, np.int8(2), out=unseeded)
    floats[_FLOAT_ROW["flag_value.UNSEEDED"]] = np.nan
    floats[_FLOAT_ROW["flag_limit.UNSEEDED"]] = np.nan
    worst = rank.max(axis=0)
    np.maximum(worst, unseeded, out=worst)
    # status rank from the worst severity rank: 0, 1 (info) -> nominal 0; 2 -> marginal 1; 3 -> outside 2
    np.subtract(worst, np.int8(1), out=worst)
    np.maximum(worst, np.int8(0), out=ranks[_RANK_ROW["status"]])


# The result columns as rows of two blocks: the outputs, then the values and the limits of the rules of the matrix
# and of UNSEEDED; the ranks of the same, and the status.
_GRADED = tuple(r.code for r in RULES if r.bad_when in ("above", "below"))
_MATRIX = (*_GRADED, "ASYMPTOTIC_LIMIT")
if tuple(code for code in FLAG_CODES if code not in _MATRIX) != ("UNSEEDED",):
    raise RuntimeError("_apply_rules knows the graded rules, ASYMPTOTIC_LIMIT and UNSEEDED, no other kind")
_BLOCK_CODES = (*_MATRIX, "UNSEEDED")
_FLOAT_COLUMNS = (
    *OUTPUT_NAMES,
    *(f"flag_value.{code}" for code in _BLOCK_CODES),
    *(f"flag_limit.{code}" for code in _BLOCK_CODES),
)
_RANK_COLUMNS = (*(f"flag.{code}" for code in _BLOCK_CODES), "status")
_FLOAT_ROW = {name: i for i, name in enumerate(_FLOAT_COLUMNS)}
_RANK_ROW = {name: i for i, name in enumerate(_RANK_COLUMNS)}
_VALUE_ROW0 = _FLOAT_ROW["flag_value." + _MATRIX[0]]
_LIMIT_ROW0 = _FLOAT_ROW["flag_limit." + _MATRIX[0]]


def _evaluate_validated(clean: ValidatedColumns, s: Mapping[str, Any]) -> dict[str, np.ndarray]:
    """The core and the rules on cache-sized chunks, each writing into its rows of the result table.

    The result columns are rows of two blocks, one large allocation each (huge pages: few page
    faults, where dozens of separate arrays would fault on every page).
    """
    n = clean.rows
    floats = np.empty((len(_FLOAT_COLUMNS), n))
    ranks = np.empty((len(_RANK_COLUMNS), n), dtype=np.int8)
    grading = _grading(s)
    for start in range(0, n, _CHUNK):
        rows = slice(start, min(n, start + _CHUNK))
        method = clean.method_code[rows]
        chunk = floats[:, rows]
        _core(
            {path: values[rows] for path, values in clean.items()},
            clean.species_code[rows],
            method,
            s,
            dict(zip(OUTPUT_NAMES, chunk, strict=False)),  # the outputs lead the block
        )
        _apply_rules(chunk, ranks[:, rows], method, grading)
    return {**dict(zip(_FLOAT_COLUMNS, floats, strict=True)), **dict(zip(_RANK_COLUMNS, ranks, strict=True))}


def evaluate_table(columns: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> dict[str, np.ndarray]:
    """Evaluate N shots given as dotted-path columns (MODEL.md sections 2-7); NaN cells mean absent."""
    s = resolve_settings(settings)
    return _evaluate_validated(validate_columns(columns), s)


def _none_if_nan(x: float) -> float | None:
    return None if math.isnan(x) else float(x)


def evaluate_shot(shot: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Evaluate one shot in the API JSON shape through the vectorised core (MODEL.md sections 2-7)."""
    s = resolve_settings(settings)
    table = _evaluate_validated(clean_shot_columns(shot), s)
    result: dict[str, Any] = {name: _none_if_nan(table[name][0]) for name in OUTPUT_NAMES}
    result["status"] = STATUSES[table["status"][0]]
    flags = []
    for code in FLAG_CODES:
        severity = SEVERITY_BY_RANK[table["flag." + code][0]]
        if severity:
            value = _none_if_nan(table["flag_value." + code][0])
            limit = _none_if_nan(table["flag_limit." + code][0])
            flags.append(
                {
                    "code": code,
                    "severity": severity,
                    "value": value,
                    "limit": limit,
                    "message": flag_message(code, severity, value, limit),
                }
            )
    result["flags"] = flags
    return result


def _one_shot(columns: Mapping[str, Any]) -> ValidatedColumns:
    clean = validate_columns(columns)
    if clean.rows != 1:
        raise ValueError("the growth curves are drawn for one shot: give one-row columns")
    return clean


def _one_shot_core(
    clean: ValidatedColumns, n: int, s: Mapping[str, Any], changes: Mapping[str, np.ndarray], names: tuple[str, ...]
) -> dict[str, np.ndarray]:
    """Chosen outputs of one validated shot repeated n times, with some inputs changed per row."""
    rows = {path: np.repeat(values, n) for path, values in clean.items()}
    rows.update(changes)
    out = {name: np.empty(n) for name in names}
    with np.errstate(all="ignore"):  # z = 0: no growth yet
        _core(rows, np.repeat(clean.species_code, n), np.repeat(clean.method_code, n), s, out)
    return out


def _distances(values: Any, what: str) -> np.ndarray:
    x = np.asarray(values, dtype=float).reshape(-1)
    if not np.all(np.isfinite(x) & (x >= 0.0)):
        raise ValueError(f"{what} must be finite distances >= 0 in metres")
    return x


def growth_along_plasma(
    columns: Mapping[str, Any], z_m: Any, settings: Mapping[str, Any] | None = None
) -> dict[str, np.ndarray]:
    """N(z) and the linear delta(z) (not clipped) at the reference slice of the one shot in `columns` (MODEL.md 4)."""
    s = resolve_settings(settings)
    z = _distances(z_m, "z_m")
    out = _one_shot_core(_one_shot(columns), z.size, s, {"plasma.length_m": z}, ("efolds_exit", _LOG_MODULATION_EXIT))
    return {"efolds": out["efolds_exit"], "modulation": np.exp(out[_LOG_MODULATION_EXIT])}


def efolds_along_bunch(columns: Mapping[str, Any], xi_m: Any, settings: Mapping[str, Any] | None = None) -> np.ndarray:
    """N(L, xi): exit e-folds of the slice xi metres behind the seed, for the one shot in `columns` (MODEL.md 4)."""
    s = dict(resolve_settings(settings))
    xi = _distances(xi_m, "xi_m")
    clean = _one_shot(columns)
    s["reference_slice_sigma"] = xi / (clean["driver.sigma_z_mm"] * U.MM)  # the reference slice moved to each xi
    return _one_shot_core(clean, xi.size, s, {}, ("efolds_exit",))["efolds_exit"]


__all__ = [
    "MODEL_VERSION",
    "OUTPUT_NAMES",
    "efolds_along_bunch",
    "evaluate_shot",
    "evaluate_table",
    "growth_along_plasma",
]
