"""Alert targets of a campaign and the log of their deliveries (one row per attempt)."""

from __future__ import annotations

from typing import Any

from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from app.tables import AlertDelivery, AlertTarget


def targets(session: Session, campaign_id: int) -> list[AlertTarget]:
    """The campaign's targets, oldest first."""
    return list(
        session.scalars(select(AlertTarget).where(AlertTarget.campaign_id == campaign_id).order_by(AlertTarget.id))
    )


def get_target(session: Session, campaign_id: int, target_id: int) -> AlertTarget | None:
    return session.scalar(
        select(AlertTarget).where(AlertTarget.campaign_id == campaign_id, AlertTarget.id == target_id)
    )


def target_by_id(session: Session, target_id: int) -> AlertTarget | None:
    return session.get(AlertTarget, target_id)


def add_target(session: Session, target: AlertTarget) -> AlertTarget:
    session.add(target)
    session.flush()
    return target


def delete_target(session: Session, target_id: int) -> None:
    session.execute(delete(AlertTarget).where(AlertTarget.id == target_id))


def log_attempt(session: Session, **values: Any) -> None:
    session.add(AlertDelivery(**values))


def recent_deliveries(session: Session, campaign_id: int, limit: int = 50) -> list[AlertDelivery]:
    """The campaign's latest delivery attempts, newest first."""
    return list(
        session.scalars(
            select(AlertDelivery)
            .where(AlertDelivery.campaign_id == campaign_id)
            .order_by(AlertDelivery.id.desc())
            .limit(limit)
        )
    )


def attempts_of(session: Session, job_id: str) -> list[AlertDelivery]:
    """Every logged attempt of one delivery job, first first."""
    return list(session.scalars(select(AlertDelivery).where(AlertDelivery.job_id == job_id).order_by(AlertDelivery.id)))
