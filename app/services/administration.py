"""What admins see and do beside campaigns: the tokens (list, create, revoke) and the
audit trail of writes, in the API's shapes (the admin page shows the same)."""

from __future__ import annotations

from datetime import timedelta

from sqlalchemy.orm import Session

from app.schemas import AuditEntryOut, AuditPage, TokenCreate, TokenCreated, TokenList, TokenOut
from app.services import auth
from app.services.auth import TokenInfo, TokenListing
from app.store import audit

MAX_AUDIT_PAGE = 500


def token_out(t: TokenListing) -> TokenOut:
    return TokenOut(
        id=t.id,
        name=t.name,
        role=t.role,
        state=t.state,  # type: ignore[arg-type]
        created_at=t.created_at,
        created_by=t.created_by,
        expires_at=t.expires_at,
        last_used_at=t.last_used_at,
        revoked_at=t.revoked_at,
        sessions=t.sessions,
    )


def token_list(session: Session) -> TokenList:
    return TokenList(items=[token_out(t) for t in auth.list_tokens(session)])


def create_token(session: Session, data: TokenCreate, who: TokenInfo) -> TokenCreated:
    """A new token, shown once in the answer (audited as created by ``who``)."""
    expires_in = timedelta(days=data.expires_in_days) if data.expires_in_days is not None else None
    raw, token_id = auth.issue_token(session, data.role, data.name, who.actor, expires_in=expires_in)
    listing = next(t for t in auth.list_tokens(session) if t.id == token_id)
    return TokenCreated(**token_out(listing).model_dump(), token=raw)


def revoke_token(session: Session, token_id: int, who: TokenInfo) -> TokenOut:
    return token_out(auth.revoke_token(session, token_id, who.actor))


def audit_page(
    session: Session,
    *,
    campaign: str | None = None,
    action: str | None = None,
    actor: str | None = None,
    before: int | None = None,
    limit: int = 100,
) -> AuditPage:
    """The newest writes first; ``next_before`` pages further back."""
    limit = max(1, min(limit, MAX_AUDIT_PAGE))
    rows = audit.entries(session, campaign_slug=campaign, action=action, actor=actor, before_id=before, limit=limit + 1)
    items = [
        AuditEntryOut(
            id=r.id,
            at=r.at,
            actor=r.actor,
            action=r.action,
            campaign=r.campaign_slug,
            target=r.target,
            detail=r.detail or {},
        )
        for r in rows[:limit]
    ]
    return AuditPage(items=items, next_before=items[-1].id if len(rows) > limit else None)
