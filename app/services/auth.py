"""Tokens, roles and browser sessions.

Roles are ordered viewer < ingest < admin; a role grants everything below it. Tokens are
random strings shown once; only their sha256 is stored. A token may expire
(``expires_at``) and is revoked by an admin (CLI, API or page); its last use is kept to
the minute. In demo mode an anonymous visitor is a viewer (a wrong token is still refused).

A browser signs in with a token once and then holds a server-side session: the cookie
carries a random session id (only its sha256 is stored), tied to the token, ending when
the session expires, when the browser signs out, or when the token is revoked or expires.
Each session has its own CSRF token, which every state-changing form and script request
must send back. How a request presents its credentials (Bearer header or the session
cookie) is the web layer's part (``app.routers.deps``).
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlalchemy.orm import Session

from app.database import begin_write, run_write
from app.errors import Forbidden, InvalidInput, NotFound, Unauthorized
from app.store import audit, tokens
from app.tables import ApiToken
from app.times import format_utc

ROLES = ("viewer", "ingest", "admin")
_RANK = {role: i for i, role in enumerate(ROLES)}
TOKEN_PREFIX = "wlt_"
# last_used_at (and a session's last_seen_at) is written at most this often: a read does
# not take the database's write lock on every request.
LAST_USED_RESOLUTION = timedelta(minutes=1)
DEFAULT_SESSION_LIFETIME = timedelta(hours=12)


@dataclass(frozen=True)
class TokenInfo:
    name: str
    role: str
    token_id: int | None = None  # None for the anonymous demo visitor
    # Set when the caller came in through a browser session: the CSRF token its writes must carry.
    csrf_token: str | None = None

    @property
    def actor(self) -> str:
        """How this caller appears in the audit trail."""
        return "anonymous" if self.token_id is None else f"token:{self.name}"

    def can(self, role: str) -> bool:
        return has_role(self.role, role)


ANONYMOUS_VIEWER = TokenInfo(name="anonymous", role="viewer")


def has_role(held: str, needed: str) -> bool:
    return _RANK.get(held, -1) >= _RANK[needed]


def check_role(role: str) -> None:
    if role not in _RANK:
        raise ValueError(f"unknown role {role!r}; choose one of {', '.join(ROLES)}")


def hash_token(raw_token: str) -> str:
    return hashlib.sha256(raw_token.encode("utf-8")).hexdigest()


MAX_TOKEN_LIFETIME = timedelta(days=3660)


def create_token(
    session: Session,
    role: str,
    name: str,
    actor: str = "cli",
    *,
    replace_named: bool = False,
    expires_in: timedelta | None = None,
) -> str:
    """Store a new token (hashed) and return the raw token, which is never stored.

    ``expires_in``: the token stops working after that long (None: it does not expire).
    With ``replace_named`` the earlier active tokens of the same name are revoked in the
    same transaction (the demo's admin token: only the one printed last stays valid).
    """
    return issue_token(session, role, name, actor, replace_named=replace_named, expires_in=expires_in)[0]


def issue_token(
    session: Session,
    role: str,
    name: str,
    actor: str,
    *,
    replace_named: bool = False,
    expires_in: timedelta | None = None,
) -> tuple[str, int]:
    """``create_token``, returning (raw token, token id)."""
    check_role(role)
    problems = []
    if not name.strip() or len(name) > 200:
        problems.append(("name", "must be 1 to 200 characters"))
    if expires_in is not None and not timedelta(0) < expires_in <= MAX_TOKEN_LIFETIME:
        problems.append(("expires_in", f"must be positive and at most {MAX_TOKEN_LIFETIME.days} days"))
    if problems:
        raise InvalidInput(problems)
    raw = TOKEN_PREFIX + secrets.token_urlsafe(32)
    now = datetime.now(UTC)
    expires_at = now + expires_in if expires_in is not None else None
    begin_write(session)
    row = tokens.add_token(session, name, role, hash_token(raw), now, expires_at=expires_at, created_by=actor)
    audit.record(
        session,
        actor,
        "token.create",
        target=f"token:{row.id}",
        detail={"name": name, "role": role, "expires_at": format_utc(expires_at) if expires_at else None},
    )
    if replace_named:
        for revoked in tokens.revoke_tokens_named(session, name, now, keep_id=row.id):
            audit.record(
                session, actor, "token.revoke", target=f"token:{revoked}", detail={"name": name, "replaced_by": row.id}
            )
    token_id = row.id
    session.commit()
    return raw, token_id


def _info(row: ApiToken, csrf_token: str | None = None) -> TokenInfo:
    return TokenInfo(name=row.name, role=row.role, token_id=row.id, csrf_token=csrf_token)


def _note_use(session: Session, row: ApiToken, now: datetime) -> None:
    """Keep the token's last use to the minute, in its own short write."""
    if row.last_used_at is not None and now - row.last_used_at < LAST_USED_RESOLUTION:
        return
    token_id = row.id
    session.rollback()  # end the read; the write below takes the write lock first

    def work() -> None:
        begin_write(session)
        tokens.set_last_used(session, token_id, now)

    run_write(session, work)


def resolve_token(session: Session, raw_token: str | None) -> TokenInfo | None:
    """The active token's identity, or None when missing, unknown, revoked or expired."""
    if not raw_token:
        return None
    now = datetime.now(UTC)
    row = tokens.find_active_token(session, hash_token(raw_token), now)
    if row is None:
        return None
    info = _info(row)
    _note_use(session, row, now)
    return info


def identify(session: Session, raw_token: str | None, demo_mode: bool) -> TokenInfo | None:
    """Who presents ``raw_token``: a token's identity, the anonymous demo viewer (no token in
    demo mode), or None (no token). Unauthorized when a token is presented but not valid."""
    if raw_token is None:
        return ANONYMOUS_VIEWER if demo_mode else None
    info = resolve_token(session, raw_token)
    if info is None:
        raise Unauthorized("the token is unknown, revoked or expired")
    return info


# --- browser sessions ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class NewSession:
    cookie_value: str  # the random session id, for the cookie only
    csrf_token: str
    expires_at: datetime


def start_session(
    session: Session, raw_token: str, lifetime: timedelta = DEFAULT_SESSION_LIFETIME
) -> NewSession | None:
    """Sign a browser in with a token: a new server-side session, or None if the token is not valid.

    The session never outlives its token's expiry.
    """
    info = resolve_token(session, raw_token)
    if info is None or info.token_id is None:
        return None
    token_id = info.token_id
    session_id = secrets.token_urlsafe(32)
    csrf = secrets.token_urlsafe(32)
    now = datetime.now(UTC)

    def work() -> datetime:
        begin_write(session)
        row = tokens.get_token(session, token_id)
        assert row is not None
        expires_at = now + lifetime if row.expires_at is None else min(now + lifetime, row.expires_at)
        tokens.add_session(session, hash_token(session_id), row.id, csrf, now, expires_at)
        audit.record(session, info.actor, "session.start", target=f"token:{row.id}")
        return expires_at

    expires_at = run_write(session, work)
    return NewSession(session_id, csrf, expires_at)


def resolve_session(session: Session, cookie_value: str | None) -> TokenInfo | None:
    """The identity behind a session cookie (with its CSRF token), or None when the session
    is unknown, ended or expired, or its token was revoked or has expired."""
    if not cookie_value:
        return None
    now = datetime.now(UTC)
    found = tokens.find_active_session(session, hash_token(cookie_value), now)
    if found is None:
        return None
    browser, row = found
    info = _info(row, browser.csrf_token)
    session_pk, token_id = browser.id, row.id
    if now - browser.last_seen_at >= LAST_USED_RESOLUTION:
        session.rollback()  # end the read; the write below takes the write lock first

        def work() -> None:
            begin_write(session)
            tokens.set_session_seen(session, session_pk, now)
            tokens.set_last_used(session, token_id, now)

        run_write(session, work)
    return info


def end_session(session: Session, cookie_value: str | None) -> None:
    """Sign a browser out (its session id stops working at once)."""
    if not cookie_value:
        return

    def work() -> None:
        begin_write(session)
        tokens.end_sessions(session, datetime.now(UTC), session_sha256=hash_token(cookie_value))

    run_write(session, work)


def csrf_matches(info: TokenInfo, sent: str | None) -> bool:
    """Whether a request of a browser session carries the session's CSRF token."""
    return info.csrf_token is not None and sent is not None and hmac.compare_digest(info.csrf_token, sent)


# --- the token life cycle for admins ---------------------------------------------------------------------


def token_state(row: ApiToken, now: datetime) -> str:
    if row.revoked_at is not None:
        return "revoked"
    if row.expires_at is not None and row.expires_at <= now:
        return "expired"
    return "active"


@dataclass(frozen=True)
class TokenListing:
    id: int
    name: str
    role: str
    state: str  # active | expired | revoked
    created_at: datetime
    created_by: str
    expires_at: datetime | None
    last_used_at: datetime | None
    revoked_at: datetime | None
    sessions: int  # browser sessions open now


def list_tokens(session: Session, include_inactive: bool = True) -> list[TokenListing]:
    """Every token, newest first (never the token itself: it is not stored)."""
    now = datetime.now(UTC)
    open_sessions = tokens.open_session_counts(session, now)
    out = []
    for row in tokens.all_tokens(session):
        state = token_state(row, now)
        if include_inactive or state == "active":
            out.append(
                TokenListing(
                    row.id,
                    row.name,
                    row.role,
                    state,
                    row.created_at,
                    row.created_by,
                    row.expires_at,
                    row.last_used_at,
                    row.revoked_at,
                    open_sessions.get(row.id, 0) if state == "active" else 0,
                )
            )
    return out


def revoke_token(session: Session, token_id: int, actor: str) -> TokenListing:
    """Revoke a token and end its browser sessions (audited); revoking twice changes nothing."""

    def work() -> None:
        begin_write(session)
        row = tokens.get_token(session, token_id)
        if row is None:
            raise NotFound(f"token {token_id}")
        if row.revoked_at is not None:
            return
        now = datetime.now(UTC)
        tokens.revoke_token(session, token_id, now)
        ended = tokens.end_sessions(session, now, token_id=token_id)
        audit.record(
            session, actor, "token.revoke", target=f"token:{token_id}", detail={"name": row.name, "sessions": ended}
        )

    run_write(session, work)
    return next(t for t in list_tokens(session) if t.id == token_id)


def authorize(info: TokenInfo | None, role: str) -> TokenInfo:
    """The caller must hold ``role`` or a higher one: Unauthorized without a token, Forbidden below it."""
    if info is None or (info.token_id is None and not info.can(role)):
        raise Unauthorized(f"a bearer token with the {role} role is required")
    if not info.can(role):
        raise Forbidden(f"this needs the {role} role; the token has {info.role}")
    return info
