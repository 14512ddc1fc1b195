"""Tokens and roles.

Roles are ordered viewer < ingest < admin; a role grants everything below it. Tokens are
random strings shown once; only their sha256 is stored. In demo mode an anonymous
visitor is a viewer (a wrong token is still refused). How a request presents its token
(Bearer header or the dashboard's cookie) is the web layer's part (``app.routers.deps``).
"""

from __future__ import annotations

import hashlib
import secrets
from dataclasses import dataclass
from datetime import UTC, datetime

from sqlalchemy.orm import Session

from app.database import begin_write
from app.errors import Forbidden, Unauthorized
from app.store import audit, tokens

ROLES = ("viewer", "ingest", "admin")
_RANK = {role: i for i, role in enumerate(ROLES)}
TOKEN_PREFIX = "wlt_"


@dataclass(frozen=True)
class TokenInfo:
    name: str
    role: str
    token_id: int | None = None  # None for the anonymous demo visitor

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


def create_token(session: Session, role: str, name: str, actor: str = "cli", *, replace_named: bool = False) -> str:
    """Store a new token (hashed) and return the raw token, which is never stored.

    With ``replace_named`` the earlier active tokens of the same name are revoked in the
    same transaction (the demo's admin token: only the one printed last stays valid).
    """
    check_role(role)
    raw = TOKEN_PREFIX + secrets.token_urlsafe(32)
    now = datetime.now(UTC)
    begin_write(session)
    row = tokens.add_token(session, name, role, hash_token(raw), now)
    audit.record(session, actor, "token.create", target=f"token:{row.id}", detail={"name": name, "role": role})
    if replace_named:
        for revoked in tokens.revoke_tokens_named(session, name, now, keep_id=row.id):
            audit.record(
                session, actor, "token.revoke", target=f"token:{revoked}", detail={"name": name, "replaced_by": row.id}
            )
    session.commit()
    return raw


def resolve_token(session: Session, raw_token: str | None) -> TokenInfo | None:
    """The active token's identity, or None when missing, unknown or revoked."""
    if not raw_token:
        return None
    row = tokens.find_active_token(session, hash_token(raw_token))
    if row is None:
        return None
    return TokenInfo(name=row.name, role=row.role, token_id=row.id)


def identify(session: Session, raw_token: str | None, demo_mode: bool) -> TokenInfo | None:
    """Who presents ``raw_token``: a token's identity, the anonymous demo viewer (no token in
    demo mode), or None (no token). Unauthorized when a token is presented but not valid."""
    if raw_token is None:
        return ANONYMOUS_VIEWER if demo_mode else None
    info = resolve_token(session, raw_token)
    if info is None:
        raise Unauthorized("the token is unknown or revoked")
    return info


def authorize(info: TokenInfo | None, role: str) -> TokenInfo:
    """The caller must hold ``role`` or a higher one: Unauthorized without a token, Forbidden below it."""
    if info is None or (info.token_id is None and not info.can(role)):
        raise Unauthorized(f"a bearer token with the {role} role is required")
    if not info.can(role):
        raise Forbidden(f"this needs the {role} role; the token has {info.role}")
    return info
