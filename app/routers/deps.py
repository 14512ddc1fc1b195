"""FastAPI dependencies shared by every router: the database session, the settings, who
is calling (Bearer header or the dashboard's session cookie), the CSRF check of browser
writes, the rate limits and the campaign of the path."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Annotated

from fastapi import Depends, Request, Response
from sqlalchemy.orm import Session

from app.config import Settings
from app.errors import Forbidden, Unauthorized
from app.services import auth
from app.services.auth import NewSession, TokenInfo
from app.services.campaigns import Campaign, require_campaign
from app.services.rate_limits import RateLimiter

# The dashboard keeps a random session id (never the token) in this HttpOnly, SameSite=Lax cookie.
SESSION_COOKIE = "wakeledger_session"
# Browser writes send their session's CSRF token in this header (scripts) or form field.
CSRF_HEADER = "X-CSRF-Token"
CSRF_FIELD = "csrf_token"
SAFE_METHODS = ("GET", "HEAD", "OPTIONS")
_IDENTITY = "wakeledger_identity"  # request.state: (who,) once resolved


def get_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; services commit their writes, anything else rolls back."""
    with request.app.state.session_factory() as session:
        yield session


DB = Annotated[Session, Depends(get_session)]


def bearer_token(request: Request) -> str | None:
    """The raw token of an ``Authorization: Bearer`` header (a malformed header is returned
    whole, so that it fails resolution rather than falling back to the cookie)."""
    header = request.headers.get("authorization")
    if not header:
        return None
    scheme, _, value = header.partition(" ")
    if scheme.lower() == "bearer" and value.strip():
        return value.strip()
    return header


def principal_from_request(request: Request) -> TokenInfo | None:
    """Who is calling: a token's identity (from the header, or the browser session of the
    cookie), the anonymous demo viewer, or None. Resolved once per request.

    Raises Unauthorized when a token or a session is presented but not valid.
    """
    cached = getattr(request.state, _IDENTITY, None)
    if cached is not None:
        return cached[0]
    settings: Settings = request.app.state.settings
    with request.app.state.session_factory() as session:
        token = bearer_token(request)
        cookie = request.cookies.get(SESSION_COOKIE)
        if token is None and cookie:
            who = auth.resolve_session(session, cookie)
            if who is None:
                raise Unauthorized("the dashboard session has ended; sign in again")
        else:
            who = auth.identify(session, token, settings.demo_mode)
    setattr(request.state, _IDENTITY, (who,))
    return who


def check_csrf(who: TokenInfo, sent: str | None) -> None:
    """A write through a browser session must carry that session's CSRF token."""
    if who.csrf_token is not None and not auth.csrf_matches(who, sent):
        raise Forbidden(f"a browser request that changes something must send its session's {CSRF_HEADER}")


def rate_limit(request: Request, who: TokenInfo, kind: str) -> None:
    limiter: RateLimiter = request.app.state.rate_limiter
    key = f"token:{who.token_id}" if who.token_id is not None else f"anonymous:{request.client and request.client.host}"
    limiter.check(kind, key)


def require_role(role: str, changes: bool = True) -> Callable[[Request], TokenInfo]:
    """Dependency: the caller must hold ``role`` or a higher one (401 / 403 problem details).

    A request that changes something also passes the CSRF check (browser sessions) and
    counts against the caller's write budget. ``changes=False`` is for POSTs that only ask
    a question (the planner): no CSRF token needed, counted as an expensive read.
    """
    auth.check_role(role)

    def dependency(request: Request) -> TokenInfo:
        who = auth.authorize(principal_from_request(request), role)
        if request.method not in SAFE_METHODS:
            if changes:
                check_csrf(who, request.headers.get(CSRF_HEADER))
                rate_limit(request, who, "write")
            else:
                rate_limit(request, who, "expensive_read")
        return who

    dependency.__name__ = f"require_{role}" if changes else f"require_{role}_question"
    return dependency


Viewer = Annotated[TokenInfo, Depends(require_role("viewer"))]
Ingester = Annotated[TokenInfo, Depends(require_role("ingest"))]
Admin = Annotated[TokenInfo, Depends(require_role("admin"))]
# A viewer's POST that stores nothing (the planner's questions).
ViewerQuestion = Annotated[TokenInfo, Depends(require_role("viewer", changes=False))]


def expensive_read(request: Request) -> None:
    """Dependency of downloads and large documents: counts against the caller's read budget."""
    who = principal_from_request(request)
    if who is not None:
        rate_limit(request, who, "expensive_read")


ExpensiveRead = Annotated[None, Depends(expensive_read)]


def path_campaign(slug: str, session: DB) -> Campaign:
    """The campaign named by the path's ``{slug}``; NotFound (a 404 page or problem) otherwise."""
    return require_campaign(session, slug)


PathCampaign = Annotated[Campaign, Depends(path_campaign)]


def set_session_cookie(response: Response, new: NewSession, settings: Settings) -> None:
    """Keep a dashboard sign-in: HttpOnly so scripts cannot read it, SameSite=Lax, expiring with the session."""
    response.set_cookie(
        SESSION_COOKIE,
        new.cookie_value,
        httponly=True,
        samesite="lax",
        secure=settings.secure_cookies,
        path="/",
        expires=new.expires_at,
    )


def clear_session_cookie(response: Response) -> None:
    response.delete_cookie(SESSION_COOKIE, path="/")
