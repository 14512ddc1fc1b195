"""Tokens and roles, for the API (``Authorization: Bearer``) and the dashboard (cookie).

Roles are ordered viewer < ingest < admin; a role grants everything below it. Tokens are
random strings shown once; only their sha256 is stored. In demo mode an anonymous
visitor is a viewer (a wrong token is still refused).
"""

from __future__ import annotations

import hashlib
import secrets
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timezone

from fastapi import Request, Response
from sqlalchemy.orm import Session

from app.config import Settings
from app.database import begin_write
from app.problems import FORBIDDEN, UNAUTHORIZED, ProblemError
from app.store import audit, tokens

ROLES = ("viewer", "ingest", "admin")
_RANK = {role: i for i, role in enumerate(ROLES)}
# The dashboard keeps the raw token in this HttpOnly, SameSite=Lax cookie.
SESSION_COOKIE = "wakeledger_token"
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


def hash_token(raw_token: str) -> str:
    return hashlib.sha256(raw_token.encode("utf-8")).hexdigest()


def create_token(session: Session, role: str, name: str, actor: str = "cli", *, replace_named: bool = False) -> str:
    """Store a new token (hashed) and return the raw token, which is never stored.

    With ``replace_named`` the earlier active tokens of the same name are revoked in the
    same transaction (the demo's admin token: only the one printed last stays valid).
    """
    if role not in _RANK:
        raise ValueError(f"unknown role {role!r}; choose one of {', '.join(ROLES)}")
    raw = TOKEN_PREFIX + secrets.token_urlsafe(32)
    now = datetime.now(timezone.utc)
    begin_write(session)
    row = tokens.add_token(session, name, role, hash_token(raw), now)
    audit.record(session, actor, "token.create", target=f"token:{row.id}", detail={"name": name, "role": role})
    if replace_named:
        for revoked in tokens.revoke_tokens_named(session, name, now, keep_id=row.id):
            audit.record(session, actor, "token.revoke", target=f"token:{revoked}",
                         detail={"name": name, "replaced_by": row.id})
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


def token_from_request(request: Request) -> str | None:
    """The raw token from ``Authorization: Bearer`` or, failing that, the session cookie."""
    header = request.headers.get("authorization")
    if header:
        scheme, _, value = header.partition(" ")
        if scheme.lower() == "bearer" and value.strip():
            return value.strip()
        return header  # malformed: let it fail resolution rather than fall back to the cookie
    return request.cookies.get(SESSION_COOKIE) or None


def _unauthorized(detail: str) -> ProblemError:
    return ProblemError(
        401,
        "Unauthorized",
        detail,
        type_=UNAUTHORIZED,
        headers={"WWW-Authenticate": 'Bearer realm="wakeledger"'},
    )


def principal_from_request(request: Request) -> TokenInfo | None:
    """Who is calling: a token's identity, the anonymous demo viewer, or None.

    Raises 401 when a token is presented but not valid.
    """
    raw = token_from_request(request)
    settings: Settings = request.app.state.settings
    if raw is None:
        return ANONYMOUS_VIEWER if settings.demo_mode else None
    with request.app.state.session_factory() as session:
        info = resolve_token(session, raw)
    if info is None:
        raise _unauthorized("the token is unknown or revoked")
    return info


def require_role(role: str) -> Callable[[Request], TokenInfo]:
    """FastAPI dependency: the caller must hold ``role`` or a higher one (401 / 403)."""
    if role not in _RANK:
        raise ValueError(f"unknown role {role!r}")

    def dependency(request: Request) -> TokenInfo:
        info = principal_from_request(request)
        if info is None or (info.token_id is None and not info.can(role)):
            raise _unauthorized(f"a bearer token with the {role} role is required")
        if not info.can(role):
            raise ProblemError(
                403, "Forbidden", f"this needs the {role} role; the token has {info.role}", type_=FORBIDDEN
            )
        return info

    dependency.__name__ = f"require_{role}"
    return dependency


def set_session_cookie(response: Response, raw_token: str, settings: Settings) -> None:
    """Keep a dashboard login: HttpOnly so scripts cannot read it, SameSite=Lax against CSRF."""
    response.set_cookie(
        SESSION_COOKIE,
        raw_token,
        httponly=True,
        samesite="lax",
        secure=settings.secure_cookies,
        path="/",
    )


def clear_session_cookie(response: Response) -> None:
    response.delete_cookie(SESSION_COOKIE, path="/")
