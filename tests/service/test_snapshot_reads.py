"""Reports built from several queries read one snapshot (app.database.snapshot_read)."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest
from sqlalchemy import func, select

from app.database import make_engine, make_session_factory, read_meanwhile, snapshot_read
from app.tables import Campaign


def add_campaign_meanwhile(factory, slug: str = "meanwhile") -> None:
    with factory() as writer, writer.begin():
        writer.add(
            Campaign(
                slug=slug,
                name="Meanwhile",
                timezone="UTC",
                description="",
                model_settings={},
                settings_version=1,
                created_at=datetime.now(UTC),
            )
        )


def campaigns(session) -> int:
    return session.scalar(select(func.count()).select_from(Campaign))


@pytest.fixture
def factory(database_url):
    engine = make_engine(database_url)
    yield make_session_factory(engine)
    engine.dispose()


def test_a_write_committed_between_two_reads_of_a_snapshot_is_not_seen_by_the_second(factory):
    with factory() as session, snapshot_read(session) as read:
        before = campaigns(read)
        add_campaign_meanwhile(factory)
        assert campaigns(read) == before
    with factory() as session:
        assert campaigns(session) == before + 1


def test_reads_run_meanwhile_see_the_snapshot_of_the_report_not_a_write_committed_since(factory):
    with factory() as session, snapshot_read(session) as read:
        before = campaigns(read)
        add_campaign_meanwhile(factory)
        with read_meanwhile(read, campaigns) as meanwhile:
            assert campaigns(read) == before
            assert meanwhile() == before
            assert meanwhile() == before  # asked again: the same answer, not read again
