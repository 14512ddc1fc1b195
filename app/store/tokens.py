"""API tokens (stored as sha256 hashes only) and the browser sessions signed in with them."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import func, or_, select, update
from sqlalchemy.orm import Session

from app.tables import ApiToken, BrowserSession


def add_token(
    session: Session,
    name: str,
    role: str,
    token_sha256: str,
    now: datetime,
    *,
    expires_at: datetime | None = None,
    created_by: str = "",
) -> ApiToken:
    row = ApiToken(
        name=name, role=role, token_sha256=token_sha256, created_at=now, expires_at=expires_at, created_by=created_by
    )
    session.add(row)
    session.flush()
    return row


def _active(now: datetime):
    return (ApiToken.revoked_at.is_(None), or_(ApiToken.expires_at.is_(None), ApiToken.expires_at > now))


def find_active_token(session: Session, token_sha256: str, now: datetime) -> ApiToken | None:
    """The token with this hash unless it is revoked or expired."""
    return session.scalar(select(ApiToken).where(ApiToken.token_sha256 == token_sha256, *_active(now)))


def get_token(session: Session, token_id: int) -> ApiToken | None:
    return session.get(ApiToken, token_id)


def all_tokens(session: Session) -> list[ApiToken]:
    return list(session.scalars(select(ApiToken).order_by(ApiToken.id.desc())))


def set_last_used(session: Session, token_id: int, now: datetime) -> None:
    session.execute(update(ApiToken).where(ApiToken.id == token_id).values(last_used_at=now))


def revoke_token(session: Session, token_id: int, now: datetime) -> None:
    session.execute(update(ApiToken).where(ApiToken.id == token_id).values(revoked_at=now))


def revoke_tokens_named(session: Session, name: str, now: datetime, *, keep_id: int | None = None) -> list[int]:
    """Revoke every active token called ``name`` except ``keep_id`` (and end their sessions);
    returns the ids revoked."""
    stmt = select(ApiToken).where(ApiToken.name == name, ApiToken.revoked_at.is_(None))
    if keep_id is not None:
        stmt = stmt.where(ApiToken.id != keep_id)
    rows = session.scalars(stmt).all()
    for row in rows:
        row.revoked_at = now
        end_sessions(session, now, token_id=row.id)
    session.flush()
    return [row.id for row in rows]


# --- browser sessions -------------------------------------------------------------------------------


def add_session(
    session: Session, session_sha256: str, token_id: int, csrf_token: str, now: datetime, expires_at: datetime
) -> None:
    session.add(
        BrowserSession(
            session_sha256=session_sha256,
            token_id=token_id,
            csrf_token=csrf_token,
            created_at=now,
            expires_at=expires_at,
            last_seen_at=now,
        )
    )
    session.flush()


def find_active_session(session: Session, session_sha256: str, now: datetime) -> tuple[BrowserSession, ApiToken] | None:
    """A session that has not ended or expired, with its token, if that is active too."""
    row = session.execute(
        select(BrowserSession, ApiToken)
        .join(ApiToken, ApiToken.id == BrowserSession.token_id)
        .where(
            BrowserSession.session_sha256 == session_sha256,
            BrowserSession.revoked_at.is_(None),
            BrowserSession.expires_at > now,
            *_active(now),
        )
    ).first()
    return None if row is None else (row[0], row[1])


def set_session_seen(session: Session, session_pk: int, now: datetime) -> None:
    session.execute(update(BrowserSession).where(BrowserSession.id == session_pk).values(last_seen_at=now))


def end_sessions(
    session: Session, now: datetime, *, token_id: int | None = None, session_sha256: str | None = None
) -> int:
    """End the open sessions of a token, or one session; returns how many."""
    stmt = update(BrowserSession).where(BrowserSession.revoked_at.is_(None))
    if token_id is not None:
        stmt = stmt.where(BrowserSession.token_id == token_id)
    if session_sha256 is not None:
        stmt = stmt.where(BrowserSession.session_sha256 == session_sha256)
    return session.execute(stmt.values(revoked_at=now)).rowcount  # type: ignore[attr-defined]


def open_session_counts(session: Session, now: datetime) -> dict[int, int]:
    rows = session.execute(
        select(BrowserSession.token_id, func.count())
        .where(BrowserSession.revoked_at.is_(None), BrowserSession.expires_at > now)
        .group_by(BrowserSession.token_id)
    )
    return {token_id: count for token_id, count in rows}
