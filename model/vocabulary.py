"""The model's vocabulary: statuses, severities, species, seed methods, sections, the
output table and the dotted-path <-> column-name rule (MODEL.md sections 1, 7 and 8).

Everything above the model (store, services, pages, exports) takes these names from
here instead of spelling them again. Ranks are the positions in the tuples: a status
or severity is stored and compared as its rank and turned into text only at the edge.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Shot status, best first; the index is the status rank (MODEL.md section 7).
STATUSES: tuple[str, ...] = ("nominal", "marginal", "outside")
# Severity of a rule by rank; rank 0 = the rule did not fire (MODEL.md section 7).
SEVERITY_BY_RANK: tuple[str, ...] = ("", "info", "marginal", "outside")
# The severities a fired flag can carry, worst first (the order of tables and counts).
SEVERITIES: tuple[str, ...] = ("outside", "marginal", "info")

SPECIES: tuple[str, ...] = ("proton", "electron", "positron", "ion")
SEED_METHODS: tuple[str, ...] = ("ionization_front", "electron_bunch", "none")
SEEDED_METHODS: tuple[str, ...] = ("ionization_front", "electron_bunch")
# The known input sections of a shot (MODEL.md section 1); other top-level keys are kept verbatim.
SECTIONS: tuple[str, ...] = ("driver", "plasma", "seed", "measured")


def codes_of(values: np.ndarray, names: tuple[str, ...]) -> np.ndarray:
    """int8 index of each text value in `names`, -1 where it is none of them (the rank or code of a name)."""
    values = np.asarray(values)
    if values.dtype.kind == "U" and values.size:
        codes = _codes_of_fixed_width_text(values.reshape(-1), names)
        if codes is not None:
            return codes.reshape(values.shape)
    codes = np.full(values.shape, -1, dtype=np.int8)
    for code, name in enumerate(names):
        codes[values == name] = code
    return codes


def _codes_of_fixed_width_text(values: np.ndarray, names: tuple[str, ...]) -> np.ndarray | None:
    """codes_of on fixed-width text by its machine words: the first word picks the candidate name, one comparison of
    all words confirms it (several times faster than numpy's string comparison); None where the first words of the
    names that fit do not tell them apart."""
    word = np.uint64 if values.dtype.itemsize % 8 == 0 else np.uint32
    width = values.dtype.itemsize // np.dtype(word).itemsize
    fits = [len(name) * 4 <= values.dtype.itemsize for name in names]
    table = np.array([name if fit else "" for name, fit in zip(names, fits, strict=True)] + [""], dtype=values.dtype)
    name_words = table.view(word).reshape(len(table), width).copy()
    name_words[[i for i, fit in enumerate(fits) if not fit] + [len(names)]] = np.iinfo(word).max  # matches no text
    first = [int(name_words[i, 0]) for i, fit in enumerate(fits) if fit]
    if len(set(first)) != len(first) or width > 8:
        return None
    words = values.view(word).reshape(values.size, width)
    key = np.ascontiguousarray(words[:, 0])
    candidate = np.full(values.size, len(names), dtype=np.int8)
    for code, fit in enumerate(fits):
        if fit:
            candidate -= (key == name_words[code, 0]).astype(np.int8) * np.int8(len(names) - code)
    same = words == name_words.take(candidate, axis=0)
    row_flag = {1: np.uint8, 2: np.uint16, 4: np.uint32, 8: np.uint64}.get(width)
    if row_flag is None:
        whole = same.all(axis=1)
    else:  # a row of `width` True bytes read as one integer
        whole = same.view(row_flag).reshape(values.size) == row_flag(int.from_bytes(b"\x01" * width, "little"))
    return np.where(whole, candidate, np.int8(-1)).astype(np.int8)


def column_name(path: str) -> str:
    """The column (database, CSV, Parquet) of a dotted input path: `plasma.density_cm3` -> `plasma_density_cm3`."""
    return path.replace(".", "_", 1)


@dataclass(frozen=True)
class OutputField:
    """One output of the evaluation (MODEL.md section 8): its key, API unit ('' = dimensionless) and meaning."""

    name: str
    unit: str
    description: str
    measured_only: bool = False  # present only when the shot carries a measured frequency


def _o(name: str, unit: str, description: str, measured_only: bool = False) -> OutputField:
    return OutputField(name=name, unit=unit, description=description, measured_only=measured_only)


# MODEL.md section 8 order.
OUTPUT_FIELDS: tuple[OutputField, ...] = (
    _o("plasma_frequency_ghz", "GHz", "plasma frequency f_p at the entrance"),
    _o("plasma_wavelength_mm", "mm", "plasma wavelength lambda_p"),
    _o("skin_depth_mm", "mm", "plasma skin depth 1/k_p"),
    _o("wavebreaking_field_gv_m", "GV/m", "cold wave-breaking field E_0"),
    _o("lorentz_gamma", "", "driver Lorentz factor"),
    _o("peak_beam_density_cm3", "cm^-3", "peak beam density n_b0"),
    _o("density_ratio", "", "charge density ratio |Z| n_b0/n_0"),
    _o("kp_sigma_r", "", "k_p sigma_r"),
    _o("bunch_length_over_plasma_wavelength", "", "sigma_z/lambda_p"),
    _o("geometric_emittance_nm", "nm", "geometric emittance"),
    _o("waist_beta_m", "m", "waist beta function (null for a cold beam)"),
    _o("seed_density_cm3", "cm^-3", "equivalent cut density of the seed"),
    _o("seed_field_mv_m", "MV/m", "seed wakefield"),
    _o("seed_to_noise_efolds", "e-folds", "seeded mode over noise at the reference point"),
    _o("efolds_exit", "e-folds", "e-folds N(L) at the exit"),
    _o("modulation_exit", "", "relative radius modulation at the exit (capped at saturation)"),
    _o("growth_margin_efolds", "e-folds", "ln(delta(L)/delta_sat)"),
    _o("saturation_length_m", "m", "saturation length (null if not saturated)"),
    _o("wakefield_estimate_mv_m", "MV/m", "wakefield estimate at the reference point"),
    _o("hosing_efolds_exit", "e-folds", "hosing e-folds at the exit"),
    _o("asymptotic_validity", "", "N(L)/(k_p xi_ref)"),
    _o("phase_slip_rad", "rad", "phase slip N(z_ref)/sqrt3"),
    _o("phase_velocity_deficit", "", "(c - v_ph)/c"),
    _o("phase_per_pct_density_rad", "rad/%", "phase change for a 1 % density change"),
    _o("density_tolerance_pct", "%", "density change that moves the phase by the tolerance"),
    _o("compensating_gradient_pct_per_m", "%/m", "gradient that cancels the slip rate"),
    _o("gradient_phase_error_rad", "rad", "phase error from the gradient and the slip"),
    _o("hosing_ratio", "", "hosing ratio (project heuristic)"),
    _o("ion_motion_index", "", "ion motion index (order of magnitude)"),
    _o("divergence_ratio", "", "z_ref/beta*"),
    _o("frequency_mismatch_pct", "%", "measured over reference frequency, minus one", measured_only=True),
    _o("implied_density_cm3", "cm^-3", "entrance density implied by the measured frequency", measured_only=True),
)
OUTPUTS_BY_NAME: dict[str, OutputField] = {f.name: f for f in OUTPUT_FIELDS}
OUTPUT_NAMES: tuple[str, ...] = tuple(f.name for f in OUTPUT_FIELDS)

__all__ = [
    "OUTPUTS_BY_NAME",
    "OUTPUT_FIELDS",
    "OUTPUT_NAMES",
    "SECTIONS",
    "SEEDED_METHODS",
    "SEED_METHODS",
    "SEVERITIES",
    "SEVERITY_BY_RANK",
    "SPECIES",
    "STATUSES",
    "OutputField",
    "codes_of",
    "column_name",
]
