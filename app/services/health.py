"""Is the service able to answer: the database check behind /healthz."""

from __future__ import annotations

from sqlalchemy import text
from sqlalchemy.orm import Session, sessionmaker

from app.errors import Unavailable


def check(factory: sessionmaker[Session]) -> dict[str, str]:
    """``{"status": "ok", "database": "ok"}``, or Unavailable naming what failed."""
    try:
        with factory() as session:
            session.execute(text("SELECT 1"))
    except Exception as exc:
        raise Unavailable(f"database check failed: {type(exc).__name__}") from None
    return {"status": "ok", "database": "ok"}
