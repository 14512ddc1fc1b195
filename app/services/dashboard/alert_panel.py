"""The settings page's alerts panel: the campaign's targets, the form that adds one (the same
checks as the API, its (field, reason) problems mapped to the form's boxes) and the log of
recent deliveries."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput
from app.services import alerts
from app.tables import Campaign

DELIVERY_LOG_LINES = 50


@dataclass
class AlertPanel:
    targets: list[alerts.TargetOut]
    deliveries: list[alerts.DeliveryLine]
    statuses: tuple[str, ...] = model.STATUSES
    flag_codes: tuple[str, ...] = model.FLAG_CODES
    errors: dict[str, str] = field(default_factory=dict)  # "url" | "statuses" | "flags" -> reason
    url: str = ""  # the form's values (kept after an error)
    chosen_statuses: list[str] = field(default_factory=lambda: ["outside"])
    chosen_flags: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class TargetForm:
    """What the add form sent."""

    url: str
    statuses: list[str]
    flags: list[str]


def alert_panel(
    session: Session,
    campaign: Campaign,
    submitted: TargetForm | None = None,
    errors: Mapping[str, str] | None = None,
) -> AlertPanel:
    panel = AlertPanel(
        alerts.list_targets(session, campaign.slug),
        alerts.recent_deliveries(session, campaign, DELIVERY_LOG_LINES),
        errors=dict(errors or {}),
    )
    if submitted is not None:
        panel.url, panel.chosen_statuses, panel.chosen_flags = submitted.url, submitted.statuses, submitted.flags
    return panel


def add_from_form(session: Session, campaign: Campaign, submitted: TargetForm, actor: str) -> dict[str, str]:
    """Add the target the form describes; {} when added, else the form's errors by box."""
    try:
        alerts.add_target(session, campaign.slug, submitted.url, submitted.statuses, submitted.flags, actor)
    except InvalidInput as exc:
        return {path.split(".")[0]: reason for path, reason in reversed(exc.problems)}
    return {}


def delete_from_form(session: Session, campaign: Campaign, target_id: int, actor: str) -> None:
    """Delete a target (NotFound when the campaign has none of that id)."""
    alerts.delete_target(session, campaign.slug, target_id, actor)
