"""Reports built from several queries read one snapshot (app.database.snapshot_read)."""

from __future__ import annotations

from datetime import UTC, datetime

from sqlalchemy import func, select

from app.database import make_engine, make_session_factory, snapshot_read
from app.tables import Campaign


def test_a_write_committed_between_two_reads_of_a_snapshot_is_not_seen_by_the_second(database_url):
    engine = make_engine(database_url)
    try:
        factory = make_session_factory(engine)
        with factory() as session, snapshot_read(session) as read:
            before = read.scalar(select(func.count()).select_from(Campaign))
            with factory() as writer, writer.begin():
                writer.add(
                    Campaign(
                        slug="meanwhile",
                        name="Meanwhile",
                        timezone="UTC",
                        description="",
                        model_settings={},
                        settings_version=1,
                        created_at=datetime.now(UTC),
                    )
                )
            assert read.scalar(select(func.count()).select_from(Campaign)) == before
        with factory() as session:
            assert session.scalar(select(func.count()).select_from(Campaign)) == before + 1
    finally:
        engine.dispose()
