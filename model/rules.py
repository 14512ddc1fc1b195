"""Regime rules, campaign settings and flag messages (MODEL.md section 7).

Settings shape (every key optional in an override; overrides merge over the defaults):

    {
      "reference_slice_sigma": 1.0,     # r_ref: reference slice xi_ref = r_ref sigma_z behind the seed
      "noise_floor": 1e-3,              # floor of the relative noise eta
      "phase_tolerance_rad": pi/10,     # allowed phase jitter for density_tolerance_pct
      "saturation_modulation": 1.0,     # delta_sat
      "density_scale": 1.0,             # n_0 = density_scale x plasma.density_cm3 (the density calibration)
      "limits": {
        "WEAK_SEED": {"marginal": 4.0, "outside": 2.0},   # one entry per rule with limits
        ...,
        "ASYMPTOTIC_LIMIT": {"info": 0.1},
      },
    }

For an "above" rule the marginal limit must not exceed the outside limit; for a
"below" rule the reverse. UNSEEDED has no limits. Bad settings raise SettingsError.
The default limits are project choices, not published thresholds.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any


class SettingsError(ValueError):
    """Campaign settings that the model cannot use; `.problems` lists (setting path, reason) for every one.

    A setting path is a key (`noise_floor`) or a limit (`limits.WEAK_SEED.marginal`);
    `limits.WEAK_SEED` names a pair of limits that are out of order, `settings` the whole.
    """

    def __init__(self, problems: Sequence[tuple[str, str]] | str):
        if isinstance(problems, str):
            problems = [("settings", problems)]
        self.problems: list[tuple[str, str]] = list(problems)
        super().__init__("; ".join(f"{path}: {reason}" for path, reason in self.problems))


@dataclass(frozen=True)
class Rule:
    """One regime rule: which metric, which side is bad, and how it reads."""

    code: str
    metric: str  # output name the rule looks at
    bad_when: str  # "above" | "below" | "always" | "info_above"
    symbol: str  # how the metric is written in the message
    sentence: str  # what the flag means, completed with value and limit


RULES: tuple[Rule, ...] = (
    Rule(
        "BUNCH_NOT_LONG",
        "bunch_length_over_plasma_wavelength",
        "below",
        "sigma_z/lambda_p",
        "The bunch is too short compared with the plasma wavelength for self-modulation",
    ),
    Rule(
        "BEAM_TOO_WIDE",
        "kp_sigma_r",
        "above",
        "k_p sigma_r",
        "The beam is too wide compared with the plasma skin depth",
    ),
    Rule("NONLINEAR_DRIVE", "density_ratio", "above", "|Z| n_b0/n_0", "The beam is too dense for the linear model"),
    Rule(
        "WEAK_GROWTH",
        "growth_margin_efolds",
        "below",
        "growth margin (e-folds)",
        "The modulation does not reach saturation within the plasma",
    ),
    Rule(
        "WEAK_SEED",
        "seed_to_noise_efolds",
        "below",
        "seed over noise (e-folds)",
        "The seed is weak compared with the noise, so the phase may not be reproducible",
    ),
    Rule("BEAM_DIVERGES", "divergence_ratio", "above", "z_ref/beta*", "The beam diverges over the growth length"),
    Rule(
        "PHASE_DRIFT",
        "gradient_phase_error_rad",
        "above",
        "|phase error| (rad)",
        "The density gradient and the growth slip move the wake phase a lot",
    ),
    Rule(
        "DENSITY_MISMATCH",
        "frequency_mismatch_pct",
        "above",
        "|frequency mismatch| (%)",
        "The measured modulation frequency does not match the set plasma density",
    ),
    Rule(
        "HOSING_RISK",
        "hosing_ratio",
        "above",
        "hosing ratio",
        "Hosing may compete with self-modulation, by a project heuristic",
    ),
    Rule(
        "ION_MOTION",
        "ion_motion_index",
        "above",
        "ion motion index",
        "Plasma ions may move enough to spoil the wake, by an order-of-magnitude estimate",
    ),
    Rule(
        "SLOW_DRIVER",
        "lorentz_gamma",
        "below",
        "gamma",
        "The driver is too slow for the model, which takes it at the speed of light",
    ),
    Rule(
        "UNSEEDED",
        "",
        "always",
        "",
        "The shot is unseeded, so the modulation grows from noise and its phase is not reproducible",
    ),
    Rule(
        "ASYMPTOTIC_LIMIT",
        "asymptotic_validity",
        "info_above",
        "N/(k_p xi)",
        "The closed-form growth is only indicative here",
    ),
)
RULES_BY_CODE: dict[str, Rule] = {r.code: r for r in RULES}
FLAG_CODES: tuple[str, ...] = tuple(r.code for r in RULES)
ABS_METRIC_CODES = frozenset({"PHASE_DRIFT", "DENSITY_MISMATCH"})

DEFAULT_SETTINGS: dict[str, Any] = {
    "reference_slice_sigma": 1.0,
    "noise_floor": 1e-3,
    "phase_tolerance_rad": math.pi / 10,
    "saturation_modulation": 1.0,
    "density_scale": 1.0,
    "limits": {
        "BUNCH_NOT_LONG": {"marginal": 10.0, "outside": 3.0},
        "BEAM_TOO_WIDE": {"marginal": 1.5, "outside": 3.0},
        "NONLINEAR_DRIVE": {"marginal": 0.1, "outside": 1.0},
        "WEAK_GROWTH": {"marginal": 0.0, "outside": math.log(0.1)},
        "WEAK_SEED": {"marginal": 4.0, "outside": 2.0},
        "BEAM_DIVERGES": {"marginal": 1.0, "outside": 3.0},
        "PHASE_DRIFT": {"marginal": 2 * math.pi, "outside": 6 * math.pi},
        "DENSITY_MISMATCH": {"marginal": 2.0, "outside": 5.0},
        "HOSING_RISK": {"marginal": 0.3, "outside": 1.0},
        "ION_MOTION": {"marginal": 0.3, "outside": 1.0},
        "SLOW_DRIVER": {"marginal": 10.0, "outside": 3.0},
        "ASYMPTOTIC_LIMIT": {"info": 0.1},
    },
}

_POSITIVE_SETTINGS = ("reference_slice_sigma", "phase_tolerance_rad", "saturation_modulation", "density_scale")


def _number(value: Any, path: str, problems: list[tuple[str, str]]) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        problems.append((path, f"must be a finite number, got {value!r}"))
        return None
    return float(value)


def resolve_settings(overrides: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Merge campaign overrides over DEFAULT_SETTINGS and validate them; raise SettingsError listing every problem."""
    settings = copy.deepcopy(DEFAULT_SETTINGS)
    if not overrides:
        return settings
    if not isinstance(overrides, Mapping):
        raise SettingsError([("settings", "must be a mapping")])
    problems: list[tuple[str, str]] = []
    for key, value in overrides.items():
        if key == "limits":
            if not isinstance(value, Mapping):
                problems.append(("limits", "must be a mapping of rule code to limits"))
                continue
            for code, limits in value.items():
                if code not in settings["limits"]:
                    known = ", ".join(settings["limits"])
                    problems.append((f"limits.{code}", f"unknown rule code {code!r} (rules with limits: {known})"))
                    continue
                if not isinstance(limits, Mapping):
                    problems.append((f"limits.{code}", f"must be a mapping like {DEFAULT_SETTINGS['limits'][code]}"))
                    continue
                for name, limit in limits.items():
                    if name not in settings["limits"][code]:
                        expected = ", ".join(settings["limits"][code])
                        problems.append(
                            (f"limits.{code}.{name}", f"unknown limit {name!r} for {code} (expected {expected})")
                        )
                    elif (number := _number(limit, f"limits.{code}.{name}", problems)) is not None:
                        settings["limits"][code][name] = number
        elif key in DEFAULT_SETTINGS:
            if (number := _number(value, key, problems)) is not None:
                settings[key] = number
        else:
            problems.append((str(key), f"unknown setting {key!r} (known: {', '.join(DEFAULT_SETTINGS)})"))
    for key in _POSITIVE_SETTINGS:
        if settings[key] <= 0:
            problems.append((key, f"must be > 0, got {settings[key]!r}"))
    if settings["noise_floor"] < 0:
        problems.append(("noise_floor", f"must be >= 0, got {settings['noise_floor']!r}"))
    for code, limits in settings["limits"].items():
        if "marginal" in limits:
            above = RULES_BY_CODE[code].bad_when == "above"
            m, o = limits["marginal"], limits["outside"]
            if (above and m > o) or (not above and m < o):
                side = "above" if above else "below"
                problems.append(
                    (
                        f"limits.{code}",
                        f"limits of {code} are out of order: the rule fires {side} its limits, "
                        f"so the outside limit {o!r} must lie past the marginal limit {m!r}",
                    )
                )
    if problems:
        raise SettingsError(problems)
    return settings


def flag_message(code: str, severity: str, value: float | None, limit: float | None) -> str:
    """One plain sentence for a fired flag, naming the metric, its value and the limit crossed."""
    return flag_messages(code, [severity], [value], [limit])[0]


_SIDE = {"above": "above", "below": "below", "info_above": "above"}


def flag_messages(
    code: str, severities: Sequence[str], values: Sequence[float | None], limits: Sequence[float | None]
) -> list[str]:
    """``flag_message`` of many flags of one rule, in order.

    A batch fires thousands of flags whose limits are the campaign's few: the text around the
    value is written once per (severity, limit) and only the value is formatted per flag.
    Value and limit are written to 3 significant digits.
    """
    rule = RULES_BY_CODE[code]
    plain = rule.sentence + "."
    if rule.bad_when == "always":
        return [plain] * len(values)
    head = f"{rule.sentence}: {rule.symbol} is "
    side = _SIDE[rule.bad_when]
    tails: dict[tuple[str, float], str] = {}
    out: list[str] = []
    for severity, value, limit in zip(severities, values, limits, strict=True):
        if value is None or limit is None:
            out.append(plain)
            continue
        tail = tails.get((severity, limit)) if limit else None  # 0.0 and -0.0 are one key but read differently
        if tail is None:
            what = "the" if severity == "info" else f"the {severity}"
            tail = tails[severity, limit] = f", {side} {what} limit {limit:.3g}."
        out.append(f"{head}{value:.3g}{tail}")
    return out
