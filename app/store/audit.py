"""Audit trail of writes (append only)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.tables import AuditEntry


def record(
    session: Session,
    actor: str,
    action: str,
    *,
    campaign_slug: str | None = None,
    target: str = "",
    detail: dict[str, Any] | None = None,
) -> None:
    session.add(
        AuditEntry(
            at=datetime.now(UTC),
            actor=actor,
            action=action,
            campaign_slug=campaign_slug,
            target=target,
            detail=detail or {},
        )
    )


def entries(
    session: Session,
    *,
    campaign_slug: str | None = None,
    action: str | None = None,
    actor: str | None = None,
    before_id: int | None = None,
    limit: int = 100,
) -> list[AuditEntry]:
    """The newest entries first, optionally of one campaign, action (or action prefix
    ending in '.') or actor, older than ``before_id``."""
    stmt = select(AuditEntry).order_by(AuditEntry.id.desc()).limit(limit)
    if campaign_slug:
        stmt = stmt.where(AuditEntry.campaign_slug == campaign_slug)
    if action:
        stmt = stmt.where(AuditEntry.action.startswith(action) if action.endswith(".") else AuditEntry.action == action)
    if actor:
        stmt = stmt.where(AuditEntry.actor == actor)
    if before_id is not None:
        stmt = stmt.where(AuditEntry.id < before_id)
    return list(session.scalars(stmt))
