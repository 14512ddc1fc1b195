"""FastAPI dependencies shared by every router: the database session, the settings, who
is calling (Bearer header or the dashboard's cookie) and the campaign of the path."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Annotated

from fastapi import Depends, Request, Response
from sqlalchemy.orm import Session

from app.config import Settings
from app.services import auth
from app.services.auth import TokenInfo
from app.services.campaigns import Campaign, require_campaign

# The dashboard keeps the raw token in this HttpOnly, SameSite=Lax cookie.
SESSION_COOKIE = "wakeledger_token"


def get_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; services commit their writes, anything else rolls back."""
    with request.app.state.session_factory() as session:
        yield session


DB = Annotated[Session, Depends(get_session)]


def token_from_request(request: Request) -> str | None:
    """The raw token from ``Authorization: Bearer`` or, failing that, the session cookie."""
    header = request.headers.get("authorization")
    if header:
        scheme, _, value = header.partition(" ")
        if scheme.lower() == "bearer" and value.strip():
            return value.strip()
        return header  # malformed: let it fail resolution rather than fall back to the cookie
    return request.cookies.get(SESSION_COOKIE) or None


def principal_from_request(request: Request) -> TokenInfo | None:
    """Who is calling: a token's identity, the anonymous demo viewer, or None.

    Raises Unauthorized when a token is presented but not valid.
    """
    settings: Settings = request.app.state.settings
    with request.app.state.session_factory() as session:
        return auth.identify(session, token_from_request(request), settings.demo_mode)


def require_role(role: str) -> Callable[[Request], TokenInfo]:
    """Dependency: the caller must hold ``role`` or a higher one (401 / 403 problem details)."""
    auth.check_role(role)

    def dependency(request: Request) -> TokenInfo:
        return auth.authorize(principal_from_request(request), role)

    dependency.__name__ = f"require_{role}"
    return dependency


Viewer = Annotated[TokenInfo, Depends(require_role("viewer"))]
Ingester = Annotated[TokenInfo, Depends(require_role("ingest"))]
Admin = Annotated[TokenInfo, Depends(require_role("admin"))]


def path_campaign(slug: str, session: DB) -> Campaign:
    """The campaign named by the path's ``{slug}``; NotFound (a 404 page or problem) otherwise."""
    return require_campaign(session, slug)


PathCampaign = Annotated[Campaign, Depends(path_campaign)]


def set_session_cookie(response: Response, raw_token: str, settings: Settings) -> None:
    """Keep a dashboard login: HttpOnly so scripts cannot read it, SameSite=Lax against CSRF."""
    response.set_cookie(
        SESSION_COOKIE, raw_token, httponly=True, samesite="lax", secure=settings.secure_cookies, path="/"
    )


def clear_session_cookie(response: Response) -> None:
    response.delete_cookie(SESSION_COOKIE, path="/")
