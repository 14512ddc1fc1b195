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
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy import constants as _c

from model import competing, growth, phase, plasma, seed
from model import form_factors as ff
from model import units as U
from model.inputs import clean_shot_columns, validate_columns
from model.rules import ABS_METRIC_CODES, FLAG_CODES, RULES, flag_message, resolve_settings
from model.vocabulary import OUTPUT_NAMES, SEVERITY_BY_RANK, STATUSES

MODEL_VERSION = "2026.12.1"

_CHUNK = 32768  # rows per pass: keeps the temporaries in cache
_STATUS_OF_RANK = np.array([0, 0, 1, 2], dtype=np.int8)  # severity rank -> status rank (info counts as nominal)


def _core(cols: Mapping[str, np.ndarray], s: Mapping[str, Any]) -> dict[str, np.ndarray]:
    """All section-2..6 outputs for validated columns (API units in, output units out; SI in between)."""
    out: dict[str, np.ndarray] = {}
    # Section 2: plasma and beam.
    n0 = cols["plasma.density_cm3"] * U.PER_CM3
    omega_p = plasma.plasma_angular_frequency(n0)
    kp = omega_p / _c.c
    e0 = plasma.wavebreaking_field(n0)
    f_p = omega_p / (2.0 * np.pi)
    mass, charge = seed.driver_mass_and_charge(
        cols["driver.species"], cols["driver.mass_amu"], cols["driver.charge_state"]
    )
    momentum = cols["driver.momentum_gev"] * U.GEV_PER_C
    gamma = plasma.lorentz_factor(momentum, mass)
    population = cols["driver.population"]
    sigma_z = cols["driver.sigma_z_mm"] * U.MM
    sigma_r = cols["driver.sigma_r_mm"] * U.MM
    length = cols["plasma.length_m"]
    nb0 = plasma.peak_beam_density(population, sigma_r, sigma_z)
    kp_sigma_r = kp * sigma_r
    u = kp_sigma_r * kp_sigma_r
    g_a, _, seed_factor_a, _ = ff.slice_form_factors(0.5 * u)
    on_axis_a = 0.5 * g_a  # R(a)
    _, _, seed_factor_u, growth_factor_u = ff.slice_form_factors(u)
    eps_g = plasma.geometric_emittance(cols["driver.emittance_n_mm_mrad"] * U.MM_MRAD, momentum, mass)
    cold = eps_g <= 0.0

    out["plasma_frequency_ghz"] = f_p / U.GHZ
    out["plasma_wavelength_mm"] = 2.0 * np.pi / kp / U.MM
    out["skin_depth_mm"] = 1.0 / kp / U.MM
    out["wavebreaking_field_gv_m"] = e0 / U.GV_PER_M
    out["lorentz_gamma"] = gamma
    out["peak_beam_density_cm3"] = nb0 / U.PER_CM3
    out["density_ratio"] = nb0 / n0
    out["kp_sigma_r"] = kp_sigma_r
    out["bunch_length_over_plasma_wavelength"] = sigma_z * kp / (2.0 * np.pi)
    out["geometric_emittance_nm"] = eps_g / U.NM
    out["waist_beta_m"] = np.where(cold, np.nan, plasma.waist_beta_function(sigma_r, eps_g))

    # Section 3: seed (in logarithms: a Gaussian tail can underflow), noise, seed force.
    method = cols["seed.method"]
    front = method == "ionization_front"
    bunch = method == "electron_bunch"
    seeded = front | bunch
    zeta_s = np.where(seeded, cols["seed.position_mm"], 0.0) * U.MM
    field_per_density = seed.cut_field_per_density(kp, sigma_r, charge, on_axis_a)
    log_n_seed = np.where(front, seed.log_ionization_front_seed_density(nb0, zeta_s, sigma_z), -np.inf)
    if bunch.any():
        idx = np.nonzero(bunch)[0]
        log_field = seed.log_electron_bunch_seed_field(
            cols["seed.electron_charge_pc"][idx] * U.PC,
            cols["seed.electron_sigma_z_mm"][idx] * U.MM,
            cols["seed.electron_sigma_r_mm"][idx] * U.MM,
            kp[idx],
        )
        log_n_seed[idx] = seed.log_equivalent_cut_density(log_field, field_per_density[idx])
    n_seed = np.exp(log_n_seed)
    out["seed_density_cm3"] = n_seed / U.PER_CM3
    out["seed_field_mv_m"] = n_seed * field_per_density / U.MV_PER_M
    xi_ref = s["reference_slice_sigma"] * sigma_z
    zeta_ref = zeta_s - xi_ref
    n_ref, line_ref = seed.slice_densities(nb0, population, zeta_ref, sigma_z)
    eta = seed.relative_noise(line_ref, kp, s["noise_floor"])
    noise_density = n_ref * eta
    out["seed_to_noise_efolds"] = np.where(seeded, seed.seed_to_noise_efolds(log_n_seed, noise_density), np.nan)
    coupling_per_density = growth.coupling_per_density(charge, gamma, mass, n0)
    log_force = seed.log_seed_force(log_n_seed, noise_density, kp, coupling_per_density, seed_factor_u)

    # Section 4: growth.
    profile_integral = growth.profile_integral_from_start(zeta_ref, sigma_z, front, zeta_s)
    integrated = growth.integrated_coupling(kp, coupling_per_density, nb0, profile_integral, growth_factor_u)
    n_exit = growth.efolds(integrated, length)
    log_scale = growth.log_modulation_scale(log_force, integrated)
    log_sat = math.log(s["saturation_modulation"])
    saturated, log_delta_exit, n_ref_efolds, z_ref = growth.saturation_reference(log_scale, n_exit, length, log_sat)
    modulation = np.exp(np.minimum(log_delta_exit, log_sat))
    wakefield = growth.wakefield_estimate(e0, n_ref, n0, kp, sigma_r, seed_factor_a, xi_ref, n_ref_efolds, modulation)
    hosing_scale = growth.hosing_efolds_ratio(seed_factor_u, growth_factor_u)
    out["efolds_exit"] = n_exit
    out["modulation_exit"] = modulation
    out["growth_margin_efolds"] = log_delta_exit - log_sat
    out["saturation_length_m"] = np.where(saturated, z_ref, np.nan)
    out["wakefield_estimate_mv_m"] = wakefield / U.MV_PER_M
    out["hosing_efolds_exit"] = n_exit * hosing_scale
    out["asymptotic_validity"] = n_exit / (kp * xi_ref)
    out["_log_modulation_exit"] = log_delta_exit  # unclipped ln delta(L), for the growth curves

    # Section 5: phase.
    gradient = cols["plasma.gradient_pct_per_m"] * U.PCT
    out["phase_slip_rad"] = phase.phase_slip(n_ref_efolds)
    out["phase_velocity_deficit"] = phase.phase_velocity_deficit(n_ref_efolds, kp, z_ref)
    out["phase_per_pct_density_rad"] = phase.phase_per_pct_density(kp, xi_ref)
    out["density_tolerance_pct"] = phase.density_tolerance_pct(kp, xi_ref, s["phase_tolerance_rad"])
    out["compensating_gradient_pct_per_m"] = phase.compensating_gradient_pct_per_m(n_ref_efolds, kp, xi_ref, z_ref)
    out["gradient_phase_error_rad"] = phase.gradient_phase_error(kp, xi_ref, gradient, length, n_ref_efolds)

    # Section 6: competing effects and the measured frequency.
    ox, oy = cols["driver.offset_x_mm"], cols["driver.offset_y_mm"]
    ax, ay = cols["driver.angle_x_mrad"], cols["driver.angle_y_mrad"]
    offset = np.sqrt(ox * ox + oy * oy) * U.MM  # |x| <= 100 mm: no overflow, so no need for hypot
    angle = np.sqrt(ax * ax + ay * ay) * U.MRAD
    x_eff = competing.effective_offset(offset, angle, z_ref)
    out["hosing_ratio"] = competing.hosing_ratio(x_eff, sigma_r, n_seed, n_ref, eta, n_ref_efolds, hosing_scale)
    ion_mass = cols["plasma.ion_mass_amu"] * plasma.ATOMIC_MASS
    reported_wakefield = out["wakefield_estimate_mv_m"] * U.MV_PER_M  # E_wake is the reported estimate
    out["ion_motion_index"] = competing.ion_motion_index(
        cols["plasma.ion_charge"], ion_mass, reported_wakefield, e0, kp, xi_ref
    )
    out["divergence_ratio"] = competing.divergence_ratio(z_ref, eps_g, sigma_r)
    f_meas = cols["measured.modulation_freq_ghz"] * U.GHZ  # NaN where not measured
    out["frequency_mismatch_pct"] = 100.0 * competing.frequency_mismatch(f_meas, f_p)
    out["implied_density_cm3"] = competing.implied_density(cols["plasma.density_cm3"], f_meas, f_p)  # linear in n_0
    out["_unseeded"] = ~seeded
    return out


def _apply_rules(out: dict[str, np.ndarray], s: Mapping[str, Any], n: int) -> dict[str, np.ndarray]:
    """Severity rank (0 none, 1 info, 2 marginal, 3 outside), value and limit per flag code, and the status rank (MODEL.md section 7)."""
    flags: dict[str, np.ndarray] = {}
    worst = np.zeros(n, dtype=np.int8)
    nan_row = np.full(n, np.nan)
    with np.errstate(invalid="ignore"):
        for rule in RULES:
            code = rule.code
            limits = s["limits"].get(code, {})
            if rule.bad_when == "always":
                rank = out["_unseeded"].astype(np.int8) * np.int8(2)
                value = limit = nan_row
            else:
                metric = out[rule.metric]
                if code in ABS_METRIC_CODES:
                    metric = np.abs(metric)
                if rule.bad_when == "info_above":
                    rank = (metric > limits["info"]).astype(np.int8)
                    limit_of_rank = np.array([np.nan, limits["info"], np.nan, np.nan])
                else:
                    m, o = limits["marginal"], limits["outside"]
                    # validated order: past the outside limit implies past the marginal one
                    if rule.bad_when == "above":
                        rank = (metric > m).astype(np.int8) * np.int8(2) + (metric > o).astype(np.int8)
                    else:
                        rank = (metric < m).astype(np.int8) * np.int8(2) + (metric < o).astype(np.int8)
                    limit_of_rank = np.array([np.nan, np.nan, m, o])
                limit = np.take(limit_of_rank, rank.astype(np.intp))
                value = np.where(rank > 0, metric, np.nan)
            flags["rank." + code] = rank
            flags["flag_value." + code] = value
            flags["flag_limit." + code] = limit
            np.maximum(worst, rank, out=worst)
    flags["status_rank"] = np.take(_STATUS_OF_RANK, worst.astype(np.intp))
    return flags


def _evaluate_clean(clean: Mapping[str, np.ndarray], s: Mapping[str, Any]) -> dict[str, np.ndarray]:
    """The core in cache-sized chunks, then the rules on the whole table."""
    n = clean["driver.species"].shape[0]
    result = {name: np.empty(n) for name in OUTPUT_NAMES}
    result["_unseeded"] = np.empty(n, dtype=bool)
    for start in range(0, n, _CHUNK):
        stop = min(n, start + _CHUNK)
        out = _core({k: v[start:stop] for k, v in clean.items()}, s)
        for name, arr in result.items():
            arr[start:stop] = out[name]
    flags = _apply_rules(result, s, n)
    table: dict[str, np.ndarray] = {name: result[name] for name in OUTPUT_NAMES}
    table["status"] = flags["status_rank"]
    for code in FLAG_CODES:
        table["flag." + code] = flags["rank." + code]
        table["flag_value." + code] = flags["flag_value." + code]
        table["flag_limit." + code] = flags["flag_limit." + code]
    return table


def evaluate_table(columns: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> dict[str, np.ndarray]:
    """Evaluate N shots given as dotted-path columns (MODEL.md sections 2-7); NaN cells mean absent."""
    s = resolve_settings(settings)
    return _evaluate_clean(validate_columns(columns), s)


def _none_if_nan(x: float) -> float | None:
    return None if math.isnan(x) else float(x)


def evaluate_shot(shot: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Evaluate one shot in the API JSON shape through the vectorised core (MODEL.md sections 2-7)."""
    s = resolve_settings(settings)
    table = _evaluate_clean(clean_shot_columns(shot), s)
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


def _one_shot_rows(columns: Mapping[str, Any], n: int) -> dict[str, np.ndarray]:
    """The single validated shot of `columns` repeated n times."""
    clean = validate_columns(columns)
    if clean["driver.species"].shape[0] != 1:
        raise ValueError("the growth curves are drawn for one shot: give one-row columns")
    return {path: np.repeat(values, n) for path, values in clean.items()}


def _distances(values: Any, what: str) -> np.ndarray:
    x = np.asarray(values, dtype=float).reshape(-1)
    if not np.all(np.isfinite(x) & (x >= 0.0)):
        raise ValueError(f"{what} must be finite distances >= 0 in metres")
    return x


def growth_along_plasma(
    columns: Mapping[str, Any], z_m: Any, settings: Mapping[str, Any] | None = None
) -> dict[str, np.ndarray]:
    """N(z) and the linear delta(z) (not clipped at delta_sat) at the reference slice, z in metres along the plasma, for the one shot in `columns` (MODEL.md section 4)."""
    s = resolve_settings(settings)
    z = _distances(z_m, "z_m")
    rows = _one_shot_rows(columns, z.size)
    rows["plasma.length_m"] = z
    with np.errstate(all="ignore"):  # z = 0: no growth yet
        out = _core(rows, s)
        return {"efolds": out["efolds_exit"], "modulation": np.exp(out["_log_modulation_exit"])}


def efolds_along_bunch(columns: Mapping[str, Any], xi_m: Any, settings: Mapping[str, Any] | None = None) -> np.ndarray:
    """N(L, xi): e-folds at the plasma exit of the slice xi metres behind the seed, for the one shot in `columns` (MODEL.md section 4)."""
    s = dict(resolve_settings(settings))
    xi = _distances(xi_m, "xi_m")
    rows = _one_shot_rows(columns, xi.size)
    s["reference_slice_sigma"] = xi / (rows["driver.sigma_z_mm"] * U.MM)  # the reference slice moved to each xi
    with np.errstate(all="ignore"):
        return _core(rows, s)["efolds_exit"]


__all__ = [
    "MODEL_VERSION",
    "OUTPUT_NAMES",
    "efolds_along_bunch",
    "evaluate_shot",
    "evaluate_table",
    "growth_along_plasma",
]
