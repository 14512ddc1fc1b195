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
from collections.abc import Iterator, Mapping
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

_CHUNK = 25_000  # rows per pass: the temporaries stay in the caches (L2, L3), numpy's cost per call is spread thin
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
        if dest is None:
            return
        if scale == 1.0:
            np.copyto(dest, value)
        else:
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
    log_n_seed = np.full(zeta_s.shape, -np.inf)  # unseeded: no seed
    log_n_seed[front] = seed.log_ionization_front_seed_density(nb0[front], zeta_s[front], sigma_z[front])
    bunch = np.flatnonzero(method == _ELECTRON_BUNCH)
    if bunch.size:
        kp_sigma_r_seed = kp[bunch] * (cols["seed.electron_sigma_r_mm"][bunch] * U.MM)
        u_seed = kp_sigma_r_seed * kp_sigma_r_seed
        seed_on_axis = ff.driver_on_axis_factor(u_seed) / u_seed  # R((k_p sigma_rs)^2/2)
        log_field = seed.log_electron_bunch_seed_field(
            cols["seed.electron_charge_pc"][bunch] * U.PC,
            cols["seed.electron_sigma_z_mm"][bunch] * U.MM,
            kp[bunch],
            seed_on_axis,
        )
        log_n_seed[bunch] = seed.log_equivalent_cut_density(log_field, field_per_density[bunch])
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
    modulation = np.full(log_delta_exit.shape, s["saturation_modulation"])
    growing = np.flatnonzero(~saturated)  # below saturation at the exit (or NaN)
    modulation[growing] = np.exp(log_delta_exit[growing])
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
    for name, value in phase.phase_outputs(
        n_ref_efolds, kp, kp_xi, z_ref, gradient, length, s["phase_tolerance_rad"]
    ).items():
        put(name, value)

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
    # Only where a frequency was measured (elsewhere both are null): the reference frequency there alone.
    measured = np.flatnonzero(~np.isnan(cols["measured.modulation_freq_ghz"]))
    mismatch = np.full(n0.shape, np.nan)
    implied = np.full(n0.shape, np.nan)
    if measured.size:
        f_meas = cols["measured.modulation_freq_ghz"][measured] * U.GHZ
        f_ref = competing.reference_frequency(f_p[measured], gradient[measured], z_ref[measured])
        mismatch[measured] = competing.frequency_mismatch(f_meas, f_ref)
        implied[measured] = competing.implied_density(n0[measured], f_meas, f_ref)
    put("frequency_mismatch_pct", 100.0 * mismatch)
    put("implied_density_cm3", implied, 1.0 / U.PER_CM3)


@dataclass(frozen=True)
class _Grading:
    """The limits of the rules of _MATRIX as (rules, 1) columns, for one settings; outside is +inf for
    ASYMPTOTIC_LIMIT (never outside), whose marginal column holds its info limit."""

    marginal: np.ndarray
    outside: np.ndarray


def _grading(s: Mapping[str, Any]) -> _Grading:
    limits = [s["limits"][code] for code in _MATRIX]
    return _Grading(
        marginal=np.array([[lim.get("marginal", lim.get("info"))] for lim in limits]),
        outside=np.array([[lim.get("outside", np.inf)] for lim in limits]),
    )


def _apply_rules(floats: np.ndarray, ranks: np.ndarray, method: np.ndarray, grading: _Grading) -> None:
    """Severity rank (0 none, 1 info, 2 marginal, 3 outside) of every rule and the status rank, into a chunk of the
    rank block (MODEL.md section 7). The metrics of the rules lead the float block, grouped by the side that is bad,
    so that each group is compared with its limits in one pass, without copies (|metric| only for the two rules
    that take it)."""
    k = len(_MATRIX)
    past_marginal = np.empty((k, floats.shape[1]), dtype=bool)
    past_outside = np.empty_like(past_marginal)
    m, o = grading.marginal, grading.outside
    with np.errstate(invalid="ignore"):  # NaN metrics (unseeded, unmeasured) fire nothing
        for rows, compare, absolute in _METRIC_GROUPS:
            metric = np.abs(floats[rows]) if absolute else floats[rows]
            compare(metric, m[rows], out=past_marginal[rows])  # validated order: outside implies marginal
            compare(metric, o[rows], out=past_outside[rows])
    rank = ranks[:k]
    as_int8 = past_marginal.view(np.int8)
    np.add(as_int8, as_int8, out=rank)
    rank += past_outside.view(np.int8)
    rank[_ASYMPTOTIC] = past_marginal[_ASYMPTOTIC]  # fires as info (rank 1), which never changes the status
    unseeded = ranks[_RANK_ROW["flag.UNSEEDED"]]  # UNSEEDED: marginal whenever unseeded
    np.multiply(method == _UNSEEDED, np.int8(2), out=unseeded)
    worst = rank.max(axis=0)
    np.maximum(worst, unseeded, out=worst)
    # status rank from the worst severity rank: 0, 1 (info) -> nominal 0; 2 -> marginal 1; 3 -> outside 2
    np.subtract(worst, np.int8(1), out=worst)
    np.maximum(worst, np.int8(0), out=ranks[_RANK_ROW["status"]])


# The rules with limits (_MATRIX) in three groups: fired above the limits, fired where |metric| is above them, fired
# below them. Their metrics lead the float block in the same order, then the other outputs; the rank block holds the
# ranks of _MATRIX and UNSEEDED, then the status.
_ABOVE = tuple(r.code for r in RULES if r.bad_when in ("above", "info_above") and r.code not in ABS_METRIC_CODES)
_ABS = tuple(r.code for r in RULES if r.code in ABS_METRIC_CODES)
_BELOW = tuple(r.code for r in RULES if r.bad_when == "below")
_MATRIX = (*_ABOVE, *_ABS, *_BELOW)
if {RULES_BY_CODE[code].bad_when for code in _ABS} != {"above"} or tuple(
    code for code in FLAG_CODES if code not in _MATRIX
) != ("UNSEEDED",):
    raise RuntimeError("_apply_rules knows rules above or below their limits (|metric| above), and UNSEEDED")
_ASYMPTOTIC = _MATRIX.index("ASYMPTOTIC_LIMIT")
_METRIC_GROUPS = (
    (slice(0, len(_ABOVE)), np.greater, False),
    (slice(len(_ABOVE), len(_ABOVE) + len(_ABS)), np.greater, True),
    (slice(len(_ABOVE) + len(_ABS), len(_MATRIX)), np.less, False),
)
_METRICS = tuple(RULES_BY_CODE[code].metric for code in _MATRIX)
if len(set(_METRICS)) != len(_METRICS):
    raise RuntimeError("two rules share a metric: the float block holds each output once")
_FLOAT_COLUMNS = (*_METRICS, *(name for name in OUTPUT_NAMES if name not in _METRICS))
_RANK_COLUMNS = (*(f"flag.{code}" for code in (*_MATRIX, "UNSEEDED")), "status")
_FLOAT_ROW = {name: i for i, name in enumerate(_FLOAT_COLUMNS)}
_RANK_ROW = {name: i for i, name in enumerate(_RANK_COLUMNS)}
# The keys of a table, in the order evaluate_table has always given them.
_KEY_CODES = (*(r.code for r in RULES if r.bad_when in ("above", "below")), "ASYMPTOTIC_LIMIT", "UNSEEDED")
_TABLE_KEYS = (
    *OUTPUT_NAMES,
    *(f"flag_value.{code}" for code in _KEY_CODES),
    *(f"flag_limit.{code}" for code in _KEY_CODES),
    *(f"flag.{code}" for code in _KEY_CODES),
    "status",
)
_DERIVED = {f"{kind}.{code}": (kind, code) for kind in ("flag_value", "flag_limit") for code in _KEY_CODES}


class EvaluationTable(Mapping[str, np.ndarray]):
    """evaluate_table's result: a mapping of the keys in the module docstring to arrays of one row per shot.

    The outputs and the ranks are computed with the table. flag_value.<CODE> and flag_limit.<CODE> follow from
    them (the rule's metric where it fired, |metric| for ABS_METRIC_CODES; the outside limit where the rank is
    outside, the marginal or info limit where it fired otherwise; NaN where it did not fire, and always for
    UNSEEDED), so each is built the first time it is read and kept: most readers never ask for them.
    """

    __slots__ = ("_columns", "_grading")

    def __init__(self, columns: dict[str, np.ndarray], grading: _Grading):
        self._columns = columns
        self._grading = grading

    def __getitem__(self, key: str) -> np.ndarray:
        column = self._columns.get(key)
        if column is None:
            kind, code = _DERIVED[key]  # KeyError for a key that is not in the table
            column = self._columns[key] = self._flag_column(kind, code)
        return column

    def _flag_column(self, kind: str, code: str) -> np.ndarray:
        rank = self._columns[f"flag.{code}"]
        if code == "UNSEEDED":  # no metric, no limit
            return np.full(rank.shape, np.nan)
        i = _MATRIX.index(code)
        if kind == "flag_limit":  # the limit of each rank, NaN for rank 0 (not fired)
            marginal, outside = self._grading.marginal[i, 0], self._grading.outside[i, 0]
            return np.array([np.nan, marginal, marginal, outside]).take(rank)
        metric = self._columns[RULES_BY_CODE[code].metric]
        return np.where(rank > 0, np.abs(metric) if code in ABS_METRIC_CODES else metric, np.nan)

    def __contains__(self, key: object) -> bool:
        return key in self._columns or key in _DERIVED

    def __iter__(self) -> Iterator[str]:
        return iter(_TABLE_KEYS)

    def __len__(self) -> int:
        return len(_TABLE_KEYS)


def _evaluate_validated(clean: ValidatedColumns, s: Mapping[str, Any]) -> EvaluationTable:
    """The core and the rules on cache-sized chunks, each writing into its rows of the result table.

    The stored columns are rows of two blocks, one large allocation each (huge pages: few page
    faults, where dozens of separate arrays would fault on every page).
    """
    n = clean.rows
    floats = np.empty((len(_FLOAT_COLUMNS), n))
    ranks = np.empty((len(_RANK_COLUMNS), n), dtype=np.int8)
    outputs = dict(zip(_FLOAT_COLUMNS, floats, strict=True))
    grading = _grading(s)
    for start in range(0, n, _CHUNK):
        rows = slice(start, min(n, start + _CHUNK))
        method = clean.method_code[rows]
        _core(
            {path: values[rows] for path, values in clean.items()},
            clean.species_code[rows],
            method,
            s,
            {name: column[rows] for name, column in outputs.items()},
        )
        _apply_rules(floats[:, rows], ranks[:, rows], method, grading)
    return EvaluationTable({**outputs, **dict(zip(_RANK_COLUMNS, ranks, strict=True))}, grading)


def evaluate_table(columns: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> EvaluationTable:
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
