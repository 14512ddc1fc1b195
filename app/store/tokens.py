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
    return session.scalar(
        select(ApiToken).where(ApiToken.token_sha256 == token_sha256, ApiToken.revoked_at.is_(None))
    )
