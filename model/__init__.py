"""wakeledger closed-form model of beam self-modulation (MODEL.md sections 1-9).

Pure numpy/scipy, SI inside. Public interface: evaluate_shot, evaluate_table,
DEFAULT_SETTINGS, MODEL_VERSION, OUTPUT_FIELDS (OUTPUT_NAMES, OUTPUTS_BY_NAME), FLAG_CODES,
INPUT_FIELDS, ShotInputError, validate_shot, validate_columns (a read-only ValidatedColumns that evaluate_table
takes without checking again), plus SettingsError, resolve_settings, flag_message,
the vocabulary of model.vocabulary (STATUSES, SEVERITIES, SEVERITY_BY_RANK, SPECIES,
SEED_METHODS, SECTIONS, column_name),
and the growth curves of one shot: growth_along_plasma (N(z), delta(z)) and
efolds_along_bunch (N(L, xi)). The physics, section by section: model.plasma,
model.form_factors (section 2), model.seed (3), model.growth (4), model.phase (5),
model.competing (6). The detailed envelope solver (section 10) lives in model.envelope.
"""

from model.envelope import simulate_envelope
from model.evaluate import (
    MODEL_VERSION,
    efolds_along_bunch,
    evaluate_shot,
    evaluate_table,
    growth_along_plasma,
)
from model.inputs import INPUT_FIELDS, ShotInputError, ValidatedColumns, validate_columns, validate_shot
from model.rules import DEFAULT_SETTINGS, FLAG_CODES, SettingsError, flag_message, resolve_settings
from model.vocabulary import (
    OUTPUT_FIELDS,
    OUTPUT_NAMES,
    OUTPUTS_BY_NAME,
    SECTIONS,
    SEED_METHODS,
    SEEDED_METHODS,
    SEVERITIES,
    SEVERITY_BY_RANK,
    SPECIES,
    STATUSES,
    OutputField,
    column_name,
)

__all__ = [
    "DEFAULT_SETTINGS",
    "FLAG_CODES",
    "INPUT_FIELDS",
    "MODEL_VERSION",
    "OUTPUTS_BY_NAME",
    "OUTPUT_FIELDS",
    "OUTPUT_NAMES",
    "OutputField",
    "SECTIONS",
    "SEEDED_METHODS",
    "SEED_METHODS",
    "SEVERITIES",
    "SEVERITY_BY_RANK",
    "SPECIES",
    "STATUSES",
    "ValidatedColumns",
    "column_name",
    "SettingsError",
    "ShotInputError",
    "efolds_along_bunch",
    "evaluate_shot",
    "evaluate_table",
    "flag_message",
    "growth_along_plasma",
    "resolve_settings",
    "simulate_envelope",
    "validate_columns",
    "validate_shot",
]
