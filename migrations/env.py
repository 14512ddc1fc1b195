"""Alembic environment, driven programmatically by app.database.upgrade_database.

The caller puts either an open Connection (``config.attributes["connection"]``) or a
URL (``sqlalchemy.url``) in the Config; no alembic.ini is needed.
"""

from __future__ import annotations

from alembic import context

from app.database import make_engine
from app.tables import Base

config = context.config
target_metadata = Base.metadata


def _configure_and_run(connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _configure_and_run(connection)
        return
    engine = make_engine(config.get_main_option("sqlalchemy.url"))
    try:
        with engine.connect() as conn:
            _configure_and_run(conn)
            conn.commit()
    finally:
        engine.dispose()


if context.is_offline_mode():  # pragma: no cover - we only migrate online
    raise SystemExit("offline migrations are not supported; use `wakeledger db upgrade`")
run_migrations_online()
