"""Inputs of one shot (MODEL.md section 1): the field table and its validation.

One set of rules, two drivers:
- validate_shot(shot) for one shot in the API JSON shape (nested dicts);
- validate_columns(columns) for evaluate_table (dotted-path column arrays).
Both raise ShotInputError whose `.problems` lists (field_path, reason) for EVERY
failing field. Nothing is clipped; unknown fields are allowed and kept.

In a shot, a missing key or null means "absent"; NaN and infinity are rejected.
In a table (columns), a NaN or None cell means "absent" (there is no other way to
write a blank in a float column); infinity is rejected.
"""

from __future__ import annotations

import copy
import math
import sys
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from model.vocabulary import SECTIONS, SEED_METHODS, SPECIES, codes_of

SEED_POSITION_LIMIT_SIGMA_Z = 10.0


@dataclass(frozen=True)
class InputField:
    """One row of the MODEL.md section-1 table."""

    path: str
    unit: str
    kind: str  # "enum" | "float" | "integer"
    description: str
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False  # True: value must be > minimum
    nonzero: bool = False
    choices: tuple[str, ...] = ()
    required: bool = False
    default: Any = None
    needed_for: str = ""  # "", "species=ion", "seeded", "seed=electron_bunch"

    @property
    def range_text(self) -> str:
        if self.choices:
            return "one of " + ", ".join(self.choices)
        if self.minimum is not None and self.maximum is not None:
            if self.minimum == -self.maximum:
                return f"|value| <= {self.maximum:g}"
            return f"{self.minimum:g} to {self.maximum:g}"
        if self.minimum is not None:
            return f"> {self.minimum:g}" if self.exclusive_minimum else f">= {self.minimum:g}"
        if self.nonzero:
            return "a non-zero integer"
        return "finite"


def _f(path: str, unit: str, kind: str, description: str, **kw: Any) -> InputField:
    return InputField(path=path, unit=unit, kind=kind, description=description, **kw)


INPUT_FIELDS: tuple[InputField, ...] = (
    _f("driver.species", "", "enum", "driver species", choices=SPECIES, required=True),
    _f(
        "driver.mass_amu",
        "u",
        "float",
        "driver ion mass (species ion only)",
        minimum=0.0,
        exclusive_minimum=True,
        needed_for="species=ion",
    ),
    _f(
        "driver.charge_state",
        "e",
        "integer",
        "driver ion charge state (species ion only)",
        nonzero=True,
        needed_for="species=ion",
    ),
    _f("driver.momentum_gev", "GeV/c", "float", "mean momentum", minimum=0.01, maximum=1e5, required=True),
    _f("driver.population", "particles", "float", "bunch population N_b", minimum=1e6, maximum=1e14, required=True),
    _f("driver.sigma_z_mm", "mm", "float", "rms bunch length", minimum=1e-3, maximum=1e4, required=True),
    _f(
        "driver.sigma_r_mm",
        "mm",
        "float",
        "rms transverse size per plane at the plasma entrance",
        minimum=1e-4,
        maximum=100.0,
        required=True,
    ),
    _f(
        "driver.emittance_n_mm_mrad",
        "mm mrad",
        "float",
        "normalised rms emittance",
        minimum=0.0,
        maximum=1e3,
        default=0.0,
    ),
    _f(
        "driver.offset_x_mm",
        "mm",
        "float",
        "centroid offset from the axis, x",
        minimum=-100.0,
        maximum=100.0,
        default=0.0,
    ),
    _f(
        "driver.offset_y_mm",
        "mm",
        "float",
        "centroid offset from the axis, y",
        minimum=-100.0,
        maximum=100.0,
        default=0.0,
    ),
    _f(
        "driver.angle_x_mrad",
        "mrad",
        "float",
        "centroid angle to the axis, x",
        minimum=-100.0,
        maximum=100.0,
        default=0.0,
    ),
    _f(
        "driver.angle_y_mrad",
        "mrad",
        "float",
        "centroid angle to the axis, y",
        minimum=-100.0,
        maximum=100.0,
        default=0.0,
    ),
    _f(
        "plasma.density_cm3",
        "cm^-3",
        "float",
        "electron density at the entrance",
        minimum=1e10,
        maximum=1e20,
        required=True,
    ),
    _f(
        "plasma.gradient_pct_per_m", "%/m", "float", "linear density gradient", minimum=-50.0, maximum=50.0, default=0.0
    ),
    _f("plasma.length_m", "m", "float", "plasma length", minimum=1e-3, maximum=1e3, required=True),
    _f("plasma.ion_mass_amu", "u", "float", "plasma ion mass", minimum=0.0, exclusive_minimum=True, required=True),
    _f("plasma.ion_charge", "e", "float", "plasma ion charge", minimum=1.0, maximum=100.0, default=1.0),
    _f("seed.method", "", "enum", "seeding method", choices=SEED_METHODS, default="none"),
    _f(
        "seed.position_mm",
        "mm",
        "float",
        "seed position relative to the driver centre, + towards the head",
        needed_for="seeded",
    ),
    _f(
        "seed.electron_charge_pc",
        "pC",
        "float",
        "seed electron bunch charge",
        minimum=0.0,
        exclusive_minimum=True,
        needed_for="seed=electron_bunch",
    ),
    _f(
        "seed.electron_sigma_z_mm",
        "mm",
        "float",
        "seed electron bunch rms length",
        minimum=0.0,
        exclusive_minimum=True,
        needed_for="seed=electron_bunch",
    ),
    _f(
        "seed.electron_sigma_r_mm",
        "mm",
        "float",
        "seed electron bunch rms radius",
        minimum=0.0,
        exclusive_minimum=True,
        needed_for="seed=electron_bunch",
    ),
    _f(
        "measured.modulation_freq_ghz",
        "GHz",
        "float",
        "measured modulation frequency",
        minimum=0.0,
        exclusive_minimum=True,
    ),
    _f("measured.microbunch_count", "", "float", "counted micro-bunches"),
    _f("measured.modulation_phase_rad", "rad", "float", "measured modulation phase"),
    _f("measured.halo_radius_mm", "mm", "float", "measured halo radius"),
    _f("measured.witness_energy_mev", "MeV", "float", "witness energy"),
)

FIELDS_BY_PATH: dict[str, InputField] = {f.path: f for f in INPUT_FIELDS}

_NEEDED_TEXT = {
    "species=ion": "missing (needed for species ion)",
    "seeded": "missing (needed for seed methods ionization_front and electron_bunch)",
    "seed=electron_bunch": "missing (needed for seed method electron_bunch)",
}
_ENUM_CODES = {"driver.species": SPECIES, "seed.method": SEED_METHODS}
_ION = SPECIES.index("ion")
_UNSEEDED = SEED_METHODS.index("none")
_ELECTRON_BUNCH = SEED_METHODS.index("electron_bunch")


class ShotInputError(ValueError):
    """Bad shot input; `.problems` lists (field_path, reason) for every failing field."""

    def __init__(self, problems: Sequence[tuple[str, str]]):
        self.problems: list[tuple[str, str]] = list(problems)
        text = "; ".join(f"{path}: {reason}" for path, reason in self.problems)
        super().__init__(f"invalid shot input ({len(self.problems)} field(s)): {text}")


class ValidatedColumns(Mapping[str, np.ndarray]):
    """Columns that passed validation: every INPUT_FIELDS path as a read-only array (floats with defaults
    filled and NaN for absent; text for the two enums), the enums also as codes (indices into SPECIES and
    SEED_METHODS). evaluate_table takes them as they are, without checking them again."""

    __slots__ = ("_columns", "method_code", "rows", "species_code")

    def __init__(self, columns: dict[str, np.ndarray], species_code: np.ndarray, method_code: np.ndarray):
        self._columns = {path: _read_only(values) for path, values in columns.items()}
        self.species_code = _read_only(species_code)
        self.method_code = _read_only(method_code)
        self.rows = int(species_code.shape[0])

    def __getitem__(self, path: str) -> np.ndarray:
        return self._columns[path]

    def take(self, rows: np.ndarray) -> ValidatedColumns:
        """The given rows (integer positions), still validated."""
        return ValidatedColumns(
            {path: values[rows] for path, values in self._columns.items()},
            self.species_code[rows],
            self.method_code[rows],
        )

    def __iter__(self) -> Iterator[str]:
        return iter(self._columns)

    def __len__(self) -> int:
        return len(self._columns)


def _read_only(values: np.ndarray) -> np.ndarray:
    view = values.view()
    view.flags.writeable = False
    return view


def _rows_text(rows: np.ndarray) -> str:
    shown = ", ".join(str(int(r)) for r in rows[:5])
    more = f" and {rows.size - 5} more" if rows.size > 5 else ""
    return f" at rows {shown}{more}"


def _numeric_column(values: np.ndarray, blank_nan: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(float values, absent mask, not-a-number mask) of one column."""
    if values.dtype.kind in "fiu":
        floats = values.astype(float, copy=False)
        absent = np.isnan(floats) if blank_nan else np.zeros(floats.shape, bool)
        return floats, absent, np.zeros(floats.shape, bool)
    floats = np.full(values.shape, np.nan)
    absent = np.zeros(values.shape, bool)
    bad_type = np.zeros(values.shape, bool)
    for i, v in enumerate(values.tolist()):
        if v is None:
            absent[i] = True
        elif isinstance(v, bool) or not isinstance(v, (int, float)):
            bad_type[i] = True
        else:
            try:
                floats[i] = float(v)
            except OverflowError:  # an integer beyond float range: refused by the range check
                floats[i] = sys.float_info.max if v > 0 else -sys.float_info.max
            if blank_nan and math.isnan(floats[i]):
                absent[i] = True
    return floats, absent, bad_type


def _enum_column(values: np.ndarray, choices: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(str values with '' for absent, absent mask, codes in `choices`) of one text column.

    Any other column is turned into text in one pass (None becomes 'None', 3 becomes '3'); only its cells that
    are none of the choices are looked at one by one, to tell absent cells from unknown ones.
    """
    if values.dtype.kind == "U":
        code = codes_of(values, choices)
        absent = values == "" if (code < 0).any() else np.zeros(values.shape, bool)  # only an unknown cell can be ""
        return values, absent, code
    cells = values if values.dtype.kind == "O" else values.astype(object)
    text = cells.astype(str)
    code = codes_of(text, choices)
    absent = np.zeros(values.shape, bool)
    odd = np.flatnonzero(code < 0)
    if odd.size:
        redone = []
        for i, v in zip(odd.tolist(), cells[odd].tolist(), strict=True):
            if v is None or v == "" or (isinstance(v, float) and math.isnan(v)):
                absent[i] = True
                redone.append("")
            else:
                redone.append(v if isinstance(v, str) else repr(v))
        width = max(len(t) for t in redone)
        if width > text.dtype.itemsize // 4:
            text = text.astype(f"<U{width}")
        text[odd] = redone
    return text, absent, code


def _present_range(floats: np.ndarray) -> tuple[float, float, bool]:
    """(lowest, highest) of the cells that are not NaN, and whether there is no NaN: two passes where there is none."""
    if floats.size == 0:
        return math.nan, math.nan, True
    with np.errstate(invalid="ignore"):
        low, high = float(floats.min()), float(floats.max())  # NaN if any cell is NaN
        if math.isnan(low) or math.isnan(high):
            return float(np.fmin.reduce(floats)), float(np.fmax.reduce(floats)), False
    return low, high, True


def _all_in_range(f: InputField, floats: np.ndarray, low: float, high: float) -> bool:
    """Whether every present cell of a float column, lowest and highest given, is finite and in the field's range."""
    if math.isnan(low):  # nothing present
        return True
    if not (-math.inf < low and high < math.inf):
        return False
    if f.minimum is not None and not (low > f.minimum if f.exclusive_minimum else low >= f.minimum):
        return False
    if f.maximum is not None and high > f.maximum:
        return False
    with np.errstate(invalid="ignore"):
        if f.nonzero and np.any(floats == 0.0):
            return False
        if f.kind == "integer" and not np.all((floats == np.round(floats)) | np.isnan(floats)):
            return False
    return True


def _check_columns(
    columns: Mapping[str, Any], n: int, blank_nan: bool
) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray], list[tuple[str, str, np.ndarray]]]:
    """Validate columns by the field table; return (clean columns, enum codes, [(path, reason, bad rows)]).

    The common all-valid column costs two reductions; only a column that fails them (or has absent
    cells) is looked at cell by cell, to name the bad rows.
    """
    problems: list[tuple[str, str, np.ndarray]] = []
    clean: dict[str, np.ndarray] = {}
    codes: dict[str, np.ndarray] = {}
    absent_of: dict[str, np.ndarray] = {}  # the absent cells of the columns that have any

    def report(path: str, reason: str, mask: np.ndarray) -> None:
        if mask.any():
            problems.append((path, reason, np.flatnonzero(mask)))

    for f in INPUT_FIELDS:
        raw = columns.get(f.path)
        if raw is None:
            values = np.full(n, "") if f.kind == "enum" else np.empty(0)  # a float column absent: filled below
        else:
            values = np.asarray(raw)
            if values.ndim == 0:
                values = np.full(n, values.item(), dtype=values.dtype if values.dtype.kind != "O" else object)
            if values.shape != (n,):
                problems.append((f.path, f"column has {values.size} rows, expected {n}", np.empty(0, int)))
                continue
        if f.kind == "enum":
            text, absent, code = _enum_column(values, f.choices)
            if f.default is not None and absent.any():
                text = np.where(absent, f.default, text)
                code = np.where(absent, np.int8(f.choices.index(f.default)), code)
                absent = np.zeros(n, bool)
            unknown = code < 0
            if unknown.any():
                report(f.path, "missing", absent)
                unknown &= ~absent
                label = "species" if f.path == "driver.species" else "seed method"
                for value in np.unique(text[unknown]):
                    report(
                        f.path, f"unknown {label} {str(value)!r} (expected {f.range_text})", unknown & (text == value)
                    )
            clean[f.path] = text
            codes[f.path] = code
            continue
        if raw is None:  # the whole column is absent
            if f.required:
                report(f.path, "missing", np.ones(n, bool))
            if f.default is None:
                absent_of[f.path] = np.ones(n, bool)
            clean[f.path] = np.full(n, np.nan if f.default is None else float(f.default))
            continue
        if values.dtype.kind == "f":
            floats = values.astype(float, copy=False)
            low, high, nan_free = _present_range(floats)
            absent = np.zeros(n, bool) if nan_free or not blank_nan else np.isnan(floats)
            bad_type = None
        else:
            floats, absent, bad_type = _numeric_column(values, blank_nan)
            low, high, nan_free = _present_range(floats)
            if not bad_type.any():
                bad_type = None
        in_range = _all_in_range(f, floats, low, high)
        if bad_type is not None or not in_range or (not blank_nan and not nan_free):
            bad_type = np.zeros(n, bool) if bad_type is None else bad_type
            with np.errstate(invalid="ignore"):
                good = np.abs(floats) < np.inf
                if f.minimum is not None:
                    good &= (floats > f.minimum) if f.exclusive_minimum else (floats >= f.minimum)
                if f.maximum is not None:
                    good &= floats <= f.maximum
                if f.nonzero:
                    good &= floats != 0
                if f.kind == "integer":
                    good &= floats == np.round(floats)
            report(f.path, "not a number", bad_type)
            finite = np.isfinite(floats)
            report(f.path, "NaN or infinity is not allowed", ~absent & ~bad_type & ~finite)
            report(f.path, f"out of range (must be {f.range_text})", ~absent & ~bad_type & finite & ~good)
        if not nan_free and absent.any():
            if f.required:
                report(f.path, "missing", absent)
            if f.default is not None:
                floats = np.where(absent, f.default, floats)
            else:
                absent_of[f.path] = absent
        clean[f.path] = floats

    if "driver.species" not in codes or "seed.method" not in codes:  # a column of the wrong length
        return clean, codes, problems
    species, method = codes["driver.species"], codes["seed.method"]
    need_rules = {
        "species=ion": lambda: species == _ION,
        "seeded": lambda: (method >= 0) & (method != _UNSEEDED),
        "seed=electron_bunch": lambda: method == _ELECTRON_BUNCH,
    }
    need_masks: dict[str, np.ndarray] = {}

    def needs(condition: str) -> np.ndarray:
        """The rows where a field needed for `condition` must be present (each mask built once)."""
        if condition not in need_masks:
            need_masks[condition] = need_rules[condition]()
        return need_masks[condition]

    for f in INPUT_FIELDS:
        if f.needed_for and f.path in absent_of:
            report(f.path, _NEEDED_TEXT[f.needed_for], needs(f.needed_for) & absent_of[f.path])
    if "seed.position_mm" in clean and "driver.sigma_z_mm" in clean:
        with np.errstate(invalid="ignore"):
            beyond = np.abs(clean["seed.position_mm"]) > SEED_POSITION_LIMIT_SIGMA_Z * clean["driver.sigma_z_mm"]
        if beyond.any():
            report(
                "seed.position_mm",
                "out of range (seed position beyond 10 sigma_z of the driver)",
                beyond & needs("seeded"),
            )
    if "plasma.gradient_pct_per_m" in clean and "plasma.length_m" in clean:
        with np.errstate(invalid="ignore"):
            # n(z) = n_0 (1 + g z) must stay positive to the exit: 1 + g L > 0, g in %/m
            vanishing = clean["plasma.gradient_pct_per_m"] * clean["plasma.length_m"] <= -100.0
        report(
            "plasma.gradient_pct_per_m",
            "out of range (the density n_0 (1 + g z) must stay positive to the plasma exit: 1 + g L > 0)",
            vanishing,
        )
    order = {f.path: i for i, f in enumerate(INPUT_FIELDS)}
    problems.sort(key=lambda p: order.get(p[0], -1))
    return clean, codes, problems


def _column_rows(columns: Mapping[str, Any]) -> int:
    lengths = {np.shape(v)[0] for v in columns.values() if np.ndim(v) == 1}
    if len(lengths) > 1:
        raise ShotInputError([("columns", f"columns have different lengths {sorted(lengths)}")])
    return lengths.pop() if lengths else 1


def validate_columns(columns: Mapping[str, Any], nan_is_absent: bool = True) -> ValidatedColumns:
    """Validate dotted-path columns for evaluate_table; return clean columns (floats, defaults filled, NaN = absent).

    None cells are always absent; NaN cells are absent too unless nan_is_absent=False
    (then NaN is refused as in a shot: use that for columns built from API payloads).
    The result is read-only and passes straight through evaluate_table.
    """
    if isinstance(columns, ValidatedColumns):
        return columns
    n = _column_rows(columns)
    clean, codes, problems = _check_columns(columns, n, blank_nan=nan_is_absent)
    if problems:
        raise ShotInputError(
            [(path, reason + (_rows_text(rows) if rows.size else "")) for path, reason, rows in problems]
        )
    return ValidatedColumns(clean, codes["driver.species"], codes["seed.method"])


def refused_rows(columns: Mapping[str, Any], nan_is_absent: bool = True) -> np.ndarray:
    """The rows validate_columns would refuse, as a boolean mask (the per-row form of the same check)."""
    n = _column_rows(columns)
    _, _, problems = _check_columns(columns, n, blank_nan=nan_is_absent)
    refused = np.zeros(n, dtype=bool)
    for _, _, rows in problems:
        refused[rows] = True
    return refused


def shot_to_columns(shot: Mapping[str, Any]) -> tuple[dict[str, np.ndarray], list[tuple[str, str]]]:
    """Flatten a shot's known fields to 1-row columns; report sections that are not objects."""
    problems: list[tuple[str, str]] = []
    columns: dict[str, np.ndarray] = {}
    for section in SECTIONS:
        block = shot.get(section)
        if block is not None and not isinstance(block, Mapping):
            problems.append((section, "not an object"))
            block = None
        for f in INPUT_FIELDS:
            if f.path.startswith(section + "."):
                cell = np.empty(1, dtype=object)  # assigned, not built, so a list value stays one cell
                cell[0] = None if block is None else block.get(f.path.split(".", 1)[1])
                columns[f.path] = cell
    return columns, problems


def clean_shot_columns(shot: Mapping[str, Any]) -> ValidatedColumns:
    """Validate one shot (API JSON shape) and return its 1-row clean columns, as validate_columns does."""
    if not isinstance(shot, Mapping):
        raise ShotInputError([("shot", "not an object")])
    columns, problems = shot_to_columns(shot)
    seed = shot.get("seed")
    if isinstance(seed, Mapping) and seed.get("method") is None and any(v is not None for v in seed.values()):
        problems.append(("seed.method", "missing (needed when other seed fields are given)"))
    clean, codes, column_problems = _check_columns(columns, 1, blank_nan=False)
    problems += [(path, reason) for path, reason, _ in column_problems]
    if problems:
        raise ShotInputError(problems)
    return ValidatedColumns(clean, codes["driver.species"], codes["seed.method"])


def validate_shot(shot: Mapping[str, Any]) -> dict[str, Any]:
    """Validate one shot (API JSON shape); return a normalised deep copy with defaults filled (MODEL.md section 1)."""
    clean = clean_shot_columns(shot)
    normalised = copy.deepcopy(dict(shot))
    for f in INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        value = clean[f.path][0]
        if f.kind == "enum":
            value = str(value)
        elif math.isnan(value):
            continue
        elif f.kind == "integer":
            value = int(value)
        else:
            value = float(value)
        block = normalised.get(section)
        if block is None:
            block = normalised[section] = {}
        block[name] = value
    return normalised
