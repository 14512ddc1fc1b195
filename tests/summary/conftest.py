"""Fixtures of the summary tests: sessions on the shared ``database_url`` fixture (SQLite,
and PostgreSQL when the server is configured), and invented weeks of stored shots."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from sqlalchemy.orm import Session, sessionmaker

from app.database import make_engine, make_session_factory


@pytest.fixture
def session_factory(database_url: str) -> Iterator[sessionmaker[Session]]:
    engine = make_engine(database_url)
    try:
        yield make_session_factory(engine)
    finally:
        engine.dispose()
