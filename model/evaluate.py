"""evaluate_table and evaluate_shot: the closed-form shot model, one vectorised core.

evaluate_table(columns, settings) -> dict of numpy arrays:
- every name of OUTPUT_NAMES (MODEL.md section 8 order) as a float array, NaN for null;
- "status": array of str ('nominal' | 'marginal' | 'outside');
- for each code of FLAG_CODES: "flag.<CODE>" (severity str, '' where not fired),
  "flag_value.<CODE>" and "flag_limit.<CODE>" (float arrays, NaN where not fired or
  where the flag has no metric/limit, i.e. UNSEEDED).
evaluate_shot(shot, settings) builds a 1-row table, runs the same core and unpacks it
(NaN -> None, flags as a list of {code, severity, value, limit, message}).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy import constants as _c

from model import form_factors as ff
from model import growth, plasma
from model import units as U
from model.inputs import clean_shot_columns, validate_columns
from model.rules import ABS_METRIC_CODES, FLAG_CODES, RULES, SEVERITIES, flag_message, resolve_settings

MODEL_VERSION = "2026.12.1"

OUTPUT_NAMES: tuple[str, ...] = (
    "plasma_frequency_ghz", "plasma_wavelength_mm", "skin_depth_mm", "wavebreaking_field_gv_m",
    "lorentz_gamma", "peak_beam_density_cm3", "density_ratio", "kp_sigma_r",
    "bunch_length_over_plasma_wavelength", "geometric_emittance_nm", "waist_beta_m",
    "seed_density_cm3", "seed_field_mv_m", "seed_to_noise_efolds", "efolds_exit", "modulation_exit",
    "growth_margin_efolds", "saturation_length_m", "wakefield_estimate_mv_m", "hosing_efolds_exit",
    "asymptotic_validity", "phase_slip_rad", "phase_velocity_deficit", "phase_per_pct_density_rad",
    "density_tolerance_pct", "compensating_gradient_pct_per_m", "gradient_phase_error_rad",
    "hosing_ratio", "ion_motion_index", "divergence_ratio", "frequency_mismatch_pct", "implied_density_cm3",
)

_CHUNK = 32768  # rows per pass: keeps the temporaries in cache
_SQRT3 = math.sqrt(3.0)
_STATUS_NAMES = np.array(["nominal", "marginal", "outside"])
_SEVERITY_NAMES = np.array(SEVERITIES)
_STATUS_OF_RANK = np.array([0, 0, 1, 2], dtype=np.int8)  # severity rank -> status rank (info counts as nominal)


def _names_of(names: np.ndarray, index: np.ndarray) -> np.ndarray:
    """names[index] as a str array.

    Gathers the UCS-4 code units as uint32 rows (many times faster than indexing a str
    array); when nothing fired, np.zeros returns lazily mapped pages of ''.
    """
    if names[0] == "" and not index.any():
        return np.zeros(index.shape, dtype=names.dtype)
    rows = names.view(np.uint32).reshape(names.size, names.dtype.itemsize // 4)
    return np.take(rows, index.astype(np.intp), axis=0).view(names.dtype).reshape(index.shape)


def _driver_mass_and_charge(cols: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Driver mass M [kg] and charge number Z per species (MODEL.md section 2)."""
    species = cols["driver.species"]
    electron_like = (species == "electron") | (species == "positron")
    ion = species == "ion"
    mass = np.where(electron_like, _c.m_e, _c.m_p)
    mass = np.where(ion, cols["driver.mass_amu"] * plasma.ATOMIC_MASS, mass)
    charge = np.where(species == "electron", -1.0, 1.0)
    charge = np.where(ion, cols["driver.charge_state"], charge)
    return mass, charge


def _core(cols: Mapping[str, np.ndarray], s: Mapping[str, Any]) -> dict[str, np.ndarray]:
    """All section-4..6 outputs for validated columns (API units in, output units out)."""
    out: dict[str, np.ndarray] = {}
    n0 = cols["plasma.density_cm3"] * U.PER_CM3
    omega_p = plasma.plasma_angular_frequency(n0)
    kp = omega_p / _c.c
    e0 = plasma.wavebreaking_field(n0)
    f_p = omega_p / (2.0 * np.pi)
    mass, charge = _driver_mass_and_charge(cols)
    momentum = cols["driver.momentum_gev"] * U.GEV_PER_C
    gamma = plasma.lorentz_factor(momentum, mass)
    beta_gamma = momentum / (mass * _c.c)
    population = cols["driver.population"]
    sigma_z = cols["driver.sigma_z_mm"] * U.MM
    sigma_r = cols["driver.sigma_r_mm"] * U.MM
    nb0 = plasma.peak_beam_density(population, sigma_r, sigma_z)
    kp_sigma_r = kp * sigma_r
    u = kp_sigma_r * kp_sigma_r
    a = 0.5 * u
    g_a, _, seed_factor_a, _ = ff.slice_form_factors(a)
    on_axis_a = 0.5 * g_a
    _, _, seed_factor_u, growth_factor_u = ff.slice_form_factors(u)
    eps_g = cols["driver.emittance_n_mm_mrad"] * U.MM_MRAD / beta_gamma

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
    with np.errstate(divide="ignore"):
        out["waist_beta_m"] = np.where(eps_g > 0.0, sigma_r * sigma_r / np.where(eps_g > 0.0, eps_g, 1.0), np.nan)

    # Seed (section 3), kept in logarithms where a Gaussian tail can underflow.
    method = cols["seed.method"]
    front = method == "ionization_front"
    bunch = method == "electron_bunch"
    seeded = front | bunch
    zeta_s = np.where(seeded, cols["seed.position_mm"], 0.0) * U.MM
    abs_z = np.abs(charge)
    cut_field_per_density = abs_z * _c.e / (_c.epsilon_0 * kp) * u * on_axis_a  # E_seed / n_seed for a cut
    x_s = zeta_s / sigma_z
    log_n_seed = np.where(front, np.log(nb0) - 0.5 * x_s * x_s, -np.inf)
    if bunch.any():
        idx = np.nonzero(bunch)[0]
        kp_b = kp[idx]
        sz_s = cols["seed.electron_sigma_z_mm"][idx] * U.MM
        sr_s = cols["seed.electron_sigma_r_mm"][idx] * U.MM
        q = cols["seed.electron_charge_pc"][idx] * U.PC
        log_field = (
            np.log(q * kp_b * kp_b / (2.0 * np.pi * _c.epsilon_0))
            - 0.5 * (kp_b * sz_s) ** 2
            + np.log(ff.gaussian_on_axis_factor(0.5 * (kp_b * sr_s) ** 2))
        )
        log_n_seed[idx] = log_field - np.log(cut_field_per_density[idx])
    n_seed = np.exp(log_n_seed)
    out["seed_density_cm3"] = n_seed / U.PER_CM3
    out["seed_field_mv_m"] = n_seed * cut_field_per_density / U.MV_PER_M

    # Noise at the reference slice.
    xi_ref = s["reference_slice_sigma"] * sigma_z
    zeta_ref = zeta_s - xi_ref
    x_ref = zeta_ref / sigma_z
    profile_ref = np.exp(-0.5 * x_ref * x_ref)
    n_ref = nb0 * profile_ref
    line_ref = population / (np.sqrt(2.0 * np.pi) * sigma_z) * profile_ref
    eta = np.maximum(s["noise_floor"], 1.0 / np.sqrt(line_ref / kp))
    log_seed_over_noise = log_n_seed - np.log(n_ref * eta)
    out["seed_to_noise_efolds"] = np.where(seeded, log_seed_over_noise, np.nan)
    # s = (k_p^2/4) nu H(u) times max(n_seed, n_ref eta); nu = (n/n_0) Z^2 m_e/(gamma M).
    coupling_per_density = charge * charge * _c.m_e / (gamma * mass * n0)
    log_force = np.log(0.25 * kp * kp * coupling_per_density * seed_factor_u) + np.maximum(log_n_seed, np.log(n_ref * eta))

    # Growth (section 4).
    profile_integral = growth.gaussian_profile_integral(np.inf, zeta_ref, sigma_z)
    front_rows = np.nonzero(front)[0]
    if front_rows.size:  # the front cuts the bunch: integrate from zeta_s, not from +inf
        profile_integral[front_rows] = growth.gaussian_profile_integral(
            zeta_s[front_rows], zeta_ref[front_rows], sigma_z[front_rows]
        )
    coupling_kp3 = 0.25 * kp**3 * coupling_per_density * nb0 * profile_integral  # I / F(u)
    integrated = coupling_kp3 * growth_factor_u
    length = cols["plasma.length_m"]
    n_exit = growth.efolds(integrated, length)
    log_scale = growth.log_modulation_scale(log_force, integrated)
    log_delta_exit = growth.log_modulation(log_scale, n_exit)
    log_sat = math.log(s["saturation_modulation"])
    saturated = log_delta_exit >= log_sat
    n_ref_efolds = n_exit.copy()
    sat_rows = np.nonzero(saturated)[0]
    if sat_rows.size:
        n_sat = growth.efolds_at_modulation(log_sat - log_scale[sat_rows])
        n_ref_efolds[sat_rows] = np.minimum(n_sat, n_exit[sat_rows])
    z_ref = np.where(saturated, length * (n_ref_efolds / n_exit) ** 1.5, length)
    modulation = np.exp(np.minimum(log_delta_exit, log_sat))
    kp_xi = kp * xi_ref
    out["efolds_exit"] = n_exit
    out["modulation_exit"] = modulation
    out["growth_margin_efolds"] = log_delta_exit - log_sat
    out["saturation_length_m"] = np.where(saturated, z_ref, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["wakefield_estimate_mv_m"] = (
            e0 * (n_ref / n0) * u * seed_factor_a * (1.5 * kp_xi / n_ref_efolds) * modulation / U.MV_PER_M
        )
    hosing_scale = np.cbrt(seed_factor_u / growth_factor_u)  # N_h / N: F(u) replaced by H(u)
    out["hosing_efolds_exit"] = n_exit * hosing_scale
    out["asymptotic_validity"] = n_exit / kp_xi

    # Phase (section 5).
    slip = n_ref_efolds / _SQRT3
    out["phase_slip_rad"] = slip
    out["phase_velocity_deficit"] = 2.0 * slip / (3.0 * kp * z_ref)
    out["phase_per_pct_density_rad"] = kp_xi / 200.0
    out["density_tolerance_pct"] = 200.0 * s["phase_tolerance_rad"] / kp_xi
    out["compensating_gradient_pct_per_m"] = 400.0 * slip / (3.0 * kp_xi * z_ref)
    out["gradient_phase_error_rad"] = kp_xi * cols["plasma.gradient_pct_per_m"] * U.PCT * length / 2.0 - slip

    # Competing effects (section 6).
    ox, oy = cols["driver.offset_x_mm"], cols["driver.offset_y_mm"]
    ax, ay = cols["driver.angle_x_mrad"], cols["driver.angle_y_mrad"]
    offset = np.sqrt(ox * ox + oy * oy) * U.MM  # |x| <= 100 mm: no overflow, so no need for hypot
    angle = np.sqrt(ax * ax + ay * ay) * U.MRAD
    x_eff = offset + angle * z_ref / 2.0
    rho_s = np.maximum(n_seed / n_ref, eta)
    with np.errstate(over="ignore"):
        out["hosing_ratio"] = (x_eff / sigma_r) / rho_s * np.exp(n_ref_efolds * (hosing_scale - 1.0))
    ion_mass = cols["plasma.ion_mass_amu"] * plasma.ATOMIC_MASS
    wake_over_e0 = out["wakefield_estimate_mv_m"] * U.MV_PER_M / e0
    out["ion_motion_index"] = (cols["plasma.ion_charge"] * _c.m_e / ion_mass) * wake_over_e0 * kp_xi * kp_xi / 2.0
    out["divergence_ratio"] = z_ref * eps_g / (sigma_r * sigma_r)
    f_ratio = cols["measured.modulation_freq_ghz"] * U.GHZ / f_p  # NaN where not measured
    out["frequency_mismatch_pct"] = 100.0 * (f_ratio - 1.0)
    out["implied_density_cm3"] = cols["plasma.density_cm3"] * f_ratio * f_ratio
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
    table["status"] = _names_of(_STATUS_NAMES, flags["status_rank"])
    for code in FLAG_CODES:
        table["flag." + code] = _names_of(_SEVERITY_NAMES, flags["rank." + code])
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
    result["status"] = str(table["status"][0])
    flags = []
    for code in FLAG_CODES:
        severity = str(table["flag." + code][0])
        if severity:
            value = _none_if_nan(table["flag_value." + code][0])
            limit = _none_if_nan(table["flag_limit." + code][0])
            flags.append(
                {"code": code, "severity": severity, "value": value, "limit": limit,
                 "message": flag_message(code, severity, value, limit)}
            )
    result["flags"] = flags
    return result


__all__ = ["MODEL_VERSION", "OUTPUT_NAMES", "evaluate_shot", "evaluate_table"]
