"""Signing a test client (or a browser context) in: a server-side session for a token, as
the sign-in form makes it, without typing the token into the form each time."""

from __future__ import annotations

import re

from app.routers.deps import SESSION_COOKIE
from app.services.auth import NewSession, start_session


def new_session(app, raw_token: str) -> NewSession:
    """A browser session of the token (the cookie value and its CSRF token)."""
    with app.state.session_factory() as session:
        made = start_session(session, raw_token)
    assert made is not None, "the token is not valid"
    return made


def sign_in(client, raw_token: str) -> str:
    """Give the client a session cookie of the token; returns the session's CSRF token."""
    made = new_session(client.app, raw_token)
    client.cookies.set(SESSION_COOKIE, made.cookie_value)
    return made.csrf_token


def sign_in_form(client, raw_token: str, next_path: str | None = None, **headers: str):
    """Sign in the way a browser does: fetch the form (its one-off value and cookie), post it."""
    page = client.get("/sign-in")
    nonce = re.search(r'name="nonce" value="([^"]+)"', page.text)
    assert nonce is not None, "the sign-in form carries no nonce"
    data = {"token": raw_token, "nonce": nonce.group(1)}
    if next_path is not None:
        data["next"] = next_path
    return client.post("/sign-in", data=data, headers=headers, follow_redirects=False)


def page_csrf(client, path: str = "/campaigns") -> str:
    """The CSRF token a signed-in page carries (what its forms and scripts send back)."""
    found = re.search(r'<meta name="csrf-token" content="([^"]+)">', client.get(path).text)
    assert found is not None, f"{path} carries no CSRF token"
    return found.group(1)
