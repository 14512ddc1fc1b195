"""wakeledger closed-form model of beam self-modulation (MODEL.md sections 1-9).

Pure numpy/scipy, SI inside. Public interface: evaluate_shot, evaluate_table,
DEFAULT_SETTINGS, MODEL_VERSION, OUTPUT_FIELDS (OUTPUT_NAMES, OUTPUTS_BY_NAME), FLAG_CODES,
INPUT_FIELDS, ShotInputError, validate_shot, validate_columns (a read-only ValidatedColumns that evaluate_table
takes without checking again), plus SettingsError, resolve_settings, flag_message (flag_messages for many
flags of one rule),
the vocabulary of model.vocabulary (STATUSES, SEVERITIES, SEVERITY_BY_RANK, SPECIES,
SEED_METHODS, SECTIONS, column_name),
and the growth curves of one shot: growth_along_plasma (N(z), delta(z)) and
efolds_along_bunch (N(L, xi)). The physics, section by section: model.plasma,
model.form_factors (section 2), model.seed (3), model.growth (4), model.phase (5),
model.competing (6). The detailed envelope solver (section 10) lives in model.envelope.
The planner (scans, nominal windows, nearest nominal shot, sensitivities) is model.plan;
the central-difference sensitivities and the phase-jitter budget are model.sensitivity.
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
from model.plan import (
    MAX_SCAN_POINTS,
    SCANNABLE_FIELDS,
    Axis,
    PlanInputError,
    nearest_nominal,
    nominal_windows,
    plan_sensitivities,
    scan,
)
from model.rules import DEFAULT_SETTINGS, FLAG_CODES, SettingsError, flag_message, flag_messages, resolve_settings
from model.sensitivity import (
    PHASE_JITTER_SOURCES,
    PhaseJitterBudget,
    Sensitivities,
    log_sensitivities,
    phase_jitter_budget,
    wake_phase_derivatives,
)
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
    "Axis",
    "DEFAULT_SETTINGS",
    "FLAG_CODES",
    "INPUT_FIELDS",
    "MAX_SCAN_POINTS",
    "MODEL_VERSION",
    "OUTPUTS_BY_NAME",
    "OUTPUT_FIELDS",
    "OUTPUT_NAMES",
    "OutputField",
    "PHASE_JITTER_SOURCES",
    "PhaseJitterBudget",
    "PlanInputError",
    "SCANNABLE_FIELDS",
    "SECTIONS",
    "SEEDED_METHODS",
    "SEED_METHODS",
    "SEVERITIES",
    "SEVERITY_BY_RANK",
    "SPECIES",
    "STATUSES",
    "ValidatedColumns",
    "column_name",
    "Sensitivities",
    "SettingsError",
    "ShotInputError",
    "efolds_along_bunch",
    "evaluate_shot",
    "evaluate_table",
    "flag_message",
    "flag_messages",
    "growth_along_plasma",
    "log_sensitivities",
    "nearest_nominal",
    "nominal_windows",
    "phase_jitter_budget",
    "plan_sensitivities",
    "resolve_settings",
    "scan",
    "simulate_envelope",
    "validate_columns",
    "validate_shot",
    "wake_phase_derivatives",
]
