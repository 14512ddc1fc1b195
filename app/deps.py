"""FastAPI dependencies shared by every router: the DB session and the settings."""

from __future__ import annotations

from collections.abc import Iterator

from fastapi import Request
from sqlalchemy.orm import Session, sessionmaker

from app.config import Settings


def get_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_session_factory(request: Request) -> sessionmaker[Session]:
    return request.app.state.session_factory


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; services commit their writes, anything else rolls back."""
    with request.app.state.session_factory() as session:
        yield session
