"""The schema comes from Alembic migrations and matches app/tables.py."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import inspect

from app.cli import main
from app.database import make_engine, upgrade_database
from app.tables import Base


def test_upgrade_on_an_empty_database_creates_every_table(empty_database_url):
    upgrade_database(empty_database_url)
    engine = make_engine(empty_database_url)
    try:
        tables = set(inspect(engine).get_table_names())
    finally:
        engine.dispose()
    assert set(Base.metadata.tables) <= tables
    assert "alembic_version" in tables


def test_the_migration_head_matches_the_table_definitions_with_no_differences(empty_database_url):
    upgrade_database(empty_database_url)
    engine = make_engine(empty_database_url)
    try:
        with engine.connect() as conn:
            context = MigrationContext.configure(conn, opts={"compare_type": True})
            diffs = compare_metadata(context, Base.metadata)
    finally:
        engine.dispose()
    assert diffs == []


def test_wakeledger_db_upgrade_creates_the_schema_and_can_run_again(empty_database_url):
    assert main(["--database-url", empty_database_url, "db", "upgrade"]) == 0
    assert main(["--database-url", empty_database_url, "db", "upgrade"]) == 0
    engine = make_engine(empty_database_url)
    try:
        assert "shots" in inspect(engine).get_table_names()
    finally:
        engine.dispose()
