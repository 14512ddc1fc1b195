"""The ``filled_database_url`` fixture (tests/conftest.py): the rows a fill stores once are in
every test's copy, and what one test writes is in no other test's copy."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest
from sqlalchemy import func, select

from app.database import make_engine, make_session_factory
from app.tables import Campaign, Shot
from tests.support.week_data import add_campaign, insert_shots, spread_over_week

FILLS: list[str] = []


def _fill(url: str) -> None:
    FILLS.append(url)
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session, session.begin():
            campaign = add_campaign(session, "filled")
            insert_shots(session, campaign, spread_over_week(datetime(2026, 11, 16, tzinfo=UTC), 30), seed=5)
    finally:
        engine.dispose()


def _counts(url: str) -> tuple[int, int]:
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            return (
                session.scalar(select(func.count()).select_from(Campaign)),
                session.scalar(select(func.count()).select_from(Shot)),
            )
    finally:
        engine.dispose()


@pytest.mark.parametrize("turn", [1, 2])
def test_each_test_gets_the_filled_rows_and_none_of_another_tests_writes(filled_database_url, backend, turn):
    url = filled_database_url("fixture-check", _fill)
    assert _counts(url) == (1, 30)
    assert sum(1 for filled in FILLS if filled.startswith(backend)) == 1  # filled once per backend
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session, session.begin():
            # a new row gets an id past the copied ones (PostgreSQL: the sequences were moved on)
            extra = add_campaign(session, f"written-by-turn-{turn}")
            assert extra.id > session.scalar(select(Campaign.id).where(Campaign.slug == "filled"))
            insert_shots(session, extra, spread_over_week(extra.created_at, 3), prefix=f"t{turn}")
    finally:
        engine.dispose()
    assert _counts(url) == (2, 33)
