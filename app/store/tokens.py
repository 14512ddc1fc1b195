"""API tokens (stored as sha256 hashes only)."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.tables import ApiToken


def add_token(session: Session, name: str, role: str, token_sha256: str, now: datetime) -> ApiToken:
    row = ApiToken(name=name, role=role, token_sha256=token_sha256, created_at=now)
    session.add(row)
    session.flush()
    return row


def find_active_token(session: Session, token_sha256: str) -> ApiToken | None:
    return session.scalar(select(ApiToken).where(ApiToken.token_sha256 == token_sha256, ApiToken.revoked_at.is_(None)))


def revoke_tokens_named(session: Session, name: str, now: datetime, *, keep_id: int | None = None) -> list[int]:
    """Revoke every active token called ``name`` except ``keep_id``; returns the ids revoked."""
    stmt = select(ApiToken).where(ApiToken.name == name, ApiToken.revoked_at.is_(None))
    if keep_id is not None:
        stmt = stmt.where(ApiToken.id != keep_id)
    rows = session.scalars(stmt).all()
    for row in rows:
        row.revoked_at = now
    session.flush()
    return [row.id for row in rows]
