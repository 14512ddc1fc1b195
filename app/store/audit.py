"""Audit trail of writes (append only)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

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
