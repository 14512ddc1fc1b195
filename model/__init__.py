"""wakeledger closed-form model of beam self-modulation (MODEL.md sections 1-9).

Pure numpy/scipy, SI inside. Public interface: evaluate_shot, evaluate_table,
DEFAULT_SETTINGS, MODEL_VERSION, OUTPUT_NAMES, FLAG_CODES, INPUT_FIELDS,
ShotInputError, validate_shot (plus SettingsError, resolve_settings, flag_message).
The detailed envelope solver (section 10) lives in model.envelope.
"""

from model.evaluate import MODEL_VERSION, OUTPUT_NAMES, evaluate_shot, evaluate_table
from model.inputs import INPUT_FIELDS, ShotInputError, validate_columns, validate_shot
from model.rules import DEFAULT_SETTINGS, FLAG_CODES, SettingsError, flag_message, resolve_settings
from model.envelope import simulate_envelope

__all__ = [
    "DEFAULT_SETTINGS",
    "FLAG_CODES",
    "INPUT_FIELDS",
    "MODEL_VERSION",
    "OUTPUT_NAMES",
    "SettingsError",
    "ShotInputError",
    "evaluate_shot",
    "evaluate_table",
    "flag_message",
    "resolve_settings",
    "simulate_envelope",
    "validate_columns",
    "validate_shot",
]
