"""Names, units and labels of the numeric fields shown on pages and written to files.

A field has a public key (the dotted input path of MODEL.md section 1, or an output
name of section 8) and a column name (``model.column_name``: the database, CSV and
Parquet name). The one label rule, for axis titles, table headers and CSV headers:
the name followed by its unit in square brackets, ``plasma.density_cm3 [cm^-3]``;
dimensionless and text fields carry no bracket.
"""

from __future__ import annotations

import model

INPUTS_BY_PATH = {f.path: f for f in model.INPUT_FIELDS}
INPUT_PATH_OF_COLUMN = {model.column_name(f.path): f.path for f in model.INPUT_FIELDS}
TEXT_INPUTS = frozenset(f.path for f in model.INPUT_FIELDS if f.kind == "enum")

# Short axis and column titles for the key quantities (the full label is in hover and tooltips).
SHORT_LABELS = {
    "plasma_density_cm3": "density [cm\u207b\u00b3]",
    "driver_population": "population",
    "seed_position_mm": "seed position [mm]",
    "driver_sigma_z_mm": "\u03c3_z [mm]",
    "driver_sigma_r_mm": "\u03c3_r [mm]",
    "efolds_exit": "e-folds at exit",
    "growth_margin_efolds": "growth margin [e-folds]",
}


def public_key(name: str) -> str:
    """The public key of a column name or key: an output name, or the dotted input path."""
    return INPUT_PATH_OF_COLUMN.get(name, name)


def unit_of(name: str) -> str:
    """Unit of an input (path or column) or an output name; '' when it has none."""
    key = public_key(name)
    if key in model.OUTPUTS_BY_NAME:
        return model.OUTPUTS_BY_NAME[key].unit
    spec = INPUTS_BY_PATH.get(key)
    return spec.unit if spec is not None and spec.kind != "enum" else ""


def with_unit(name: str, unit: str) -> str:
    """The label rule: ``name [unit]``, or the bare name without a unit."""
    return f"{name} [{unit}]" if unit else name


def field_label(name: str) -> str:
    """``plasma.density_cm3 [cm^-3]`` for a column name, path or output name."""
    return with_unit(public_key(name), unit_of(name))


def short_label(column: str) -> str:
    return SHORT_LABELS.get(column, field_label(column))
