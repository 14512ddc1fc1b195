"""The settings page: the form of a campaign's limits and model settings, and saving it
as a merge patch (which queues the re-evaluation). The model names every bad setting by
its path (``model.SettingsError.problems``); those map to the form's boxes.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput
from app.presentation.fields import unit_of, with_unit
from app.presentation.numbers import format_number
from app.services import reevaluation
from app.services.campaign_settings import change_settings
from app.services.campaigns import effective_settings, merge_patch_between
from app.store import dashboard as store
from app.tables import Campaign
from model.rules import RULES_BY_CODE

SETTING_HELP = {
    "reference_slice_sigma": "reference slice r_ref: \u03be_ref = r_ref \u03c3_z behind the seed",
    "noise_floor": "floor of the relative noise \u03b7",
    "phase_tolerance_rad": "allowed phase jitter \u0394\u03c8_tol [rad], sets density_tolerance_pct",
    "saturation_modulation": "saturation level \u03b4_sat of the relative radius modulation",
    "density_scale": "calibration of the density diagnostic: n_0 = density_scale \u00d7 logged density "
    "(estimated on the Calibration page)",
}


SETTING_UNITS = {"phase_tolerance_rad": "rad"}


@dataclass
class SettingField:
    name: str  # form field name
    label: str
    help: str
    default: float
    current: float
    text: str  # what the input shows (the submitted text after an error)
    overridden: bool
    unit: str = ""

    @property
    def default_text(self) -> str:
        """The default, rounded, with its unit (app.presentation.numbers)."""
        return format_number(self.default, self.unit)


@dataclass
class SettingsForm:
    version: int
    model_fields: list[SettingField]
    limit_rows: list[tuple[str, str, list[SettingField]]]  # (code, help, fields)
    latest_job_id: str | None


def _limit_field_name(code: str, level: str) -> str:
    return f"limit.{code}.{level}"


def settings_form(session: Session, campaign: Campaign, submitted: Mapping[str, str] | None = None) -> SettingsForm:
    current = effective_settings(campaign)
    overrides = campaign.model_settings or {}
    submitted = submitted or {}

    def make(
        name: str, label: str, help_text: str, default: float, value: float, overridden: bool, unit: str = ""
    ) -> SettingField:
        # The box shows the value rounded (0.3142, not 0.3141592653589793); saving it unchanged
        # keeps the exact value (save_settings compares the text with this rounding).
        text = submitted.get(name, shown_value(value))
        return SettingField(name, with_unit(label, unit), help_text, default, value, text, overridden, unit)

    model_fields = [
        make(
            f"setting.{key}",
            key,
            SETTING_HELP.get(key, ""),
            default,
            current.get(key, default),
            key in overrides,
            SETTING_UNITS.get(key, ""),
        )
        for key, default in model.DEFAULT_SETTINGS.items()
        if key != "limits"
    ]
    limit_rows = []
    for code, levels in model.DEFAULT_SETTINGS["limits"].items():
        rule = RULES_BY_CODE.get(code)
        side = {"above": "fires above", "below": "fires below", "info_above": "info above"}.get(
            rule.bad_when if rule else "", ""
        )
        help_text = f"{rule.symbol}: {side} the limit" if rule else ""
        fields = [
            make(
                _limit_field_name(code, level),
                level,
                "",
                default,
                current["limits"][code][level],
                level in (overrides.get("limits", {}).get(code, {}) or {}),
                unit_of(rule.metric) if rule else "",
            )
            for level, default in levels.items()
        ]
        limit_rows.append((code, help_text, fields))
    job = store.latest_job(session, campaign.id, reevaluation.KIND)
    return SettingsForm(campaign.settings_version, model_fields, limit_rows, job.id if job else None)


@dataclass
class SettingsOutcome:
    form: SettingsForm
    errors: dict[str, str]  # form field (or "_form") -> reason
    job_id: str | None = None
    changed: bool = False


def shown_value(value: float) -> str:
    """A setting as its box shows it: rounded by the one number formatter, no unit."""
    return format_number(float(value)).replace(",", "")


def _parserounded(text: str) -> float:
    value = float(text.strip())
    if not math.isfinite(value):
        raise ValueError
    return value


def save_settings(session: Session, campaign: Campaign, submitted: Mapping[str, str], actor: str) -> SettingsOutcome:
    """Validate the form and send the change as a merge patch (which queues the re-evaluation)."""
    errors: dict[str, str] = {}
    new: dict[str, Any] = {"limits": {}}
    current = effective_settings(campaign)

    def current_of(name: str) -> float | None:
        parts = name.split(".")
        if parts[0] == "setting":
            return current.get(parts[1])
        return current["limits"].get(parts[1], {}).get(parts[2])

    def changed_value(name: str, default: float, what: str) -> float | None:
        """The box's number when it differs from the default; an empty box means the default,
        and a box left showing the rounded current value keeps the exact current value."""
        text = submitted.get(name, "")
        now = current_of(name)
        try:
            if now is not None and text.strip() == shown_value(now):
                value = float(now)
            else:
                value = _parserounded(text) if text.strip() else default
        except ValueError:
            errors[name] = f"{what} must be a finite number, e.g. {default:g}"
            return None
        return value if value != default else None

    for key, default in model.DEFAULT_SETTINGS.items():
        if key != "limits" and (value := changed_value(f"setting.{key}", default, key)) is not None:
            new[key] = value
    for code, levels in model.DEFAULT_SETTINGS["limits"].items():
        for level, default in levels.items():
            value = changed_value(_limit_field_name(code, level), default, f"the {level} limit of {code}")
            if value is not None:
                new["limits"].setdefault(code, {})[level] = value
    if not new["limits"]:
        del new["limits"]
    if not errors:
        try:
            model.resolve_settings(new)
        except model.SettingsError as exc:
            for path, reason in exc.problems:
                target = _form_name("settings." + path)
                if target.count(".") == 1 and target.startswith("limit."):  # a pair out of order: the marginal box
                    target = _limit_field_name(path.split(".")[1], "marginal")
                errors[target if target in submitted else "_form"] = reason
    if errors:
        return SettingsOutcome(settings_form(session, campaign, submitted), errors)
    old = campaign.model_settings or {}
    patch = merge_patch_between(old, new)
    if not patch:
        return SettingsOutcome(settings_form(session, campaign), {}, None, False)
    try:
        _campaign, job = change_settings(session, campaign.slug, patch, actor)
    except InvalidInput as exc:
        for path, reason in exc.problems or [("_form", exc.detail)]:
            errors[_form_name(path)] = reason
        return SettingsOutcome(settings_form(session, campaign, submitted), errors)
    return SettingsOutcome(settings_form(session, campaign), {}, job.id, True)


def _form_name(api_field: str) -> str:
    """settings.limits.WEAK_SEED.marginal -> limit.WEAK_SEED.marginal; settings.x -> setting.x."""
    parts = api_field.split(".")
    if parts[:2] == ["settings", "limits"]:
        return "limit." + ".".join(parts[2:])
    if parts[:1] == ["settings"] and len(parts) > 1:
        return "setting." + ".".join(parts[1:])
    return "_form"
