"""The same shots stored in SQLite and in PostgreSQL give the same weekly files, byte for byte:
each backend reads the week its own way (PostgreSQL in binary rows, its JSON columns as text,
the flags ordered after the read), and none of that may show in a file."""

from __future__ import annotations

import io
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta

import pytest
from sqlalchemy.orm import Session, sessionmaker

from app.database import make_engine, make_session_factory
from app.schemas import CampaignCreate
from app.services.campaigns import create_campaign
from app.services.exclusions import exclude_shot
from app.services.ingest.storing import correct_shot, ingest_shots
from app.services.weekly.summary import build_weekly_summary, week_shots
from app.services.weekly.table import write_export, write_shots_csv, write_summary_csv
from app.store.campaigns import get_campaign
from app.times import IsoWeek, campaign_zone
from tests.conftest import sqlite_scratch_copy

WEEK = IsoWeek(2026, 47)
ZONE = "America/Chicago"
NOW = datetime(2026, 11, 25, 12, 0, tzinfo=UTC)
LATE = timedelta(days=60)


def week_of_shots(make_shot) -> list[dict]:
    """Varied shots of the week and the one before: every worked example at several densities,
    with tags, notes (not all ASCII), a DAQ section (an integer beyond 64 bits in one)."""
    start, _ = WEEK.previous().bounds_utc(campaign_zone(ZONE))
    shots = []
    for i in range(60):
        at = (start + timedelta(hours=5 * i + 1)).isoformat().replace("+00:00", "Z")
        shot = make_shot(i % 5, shot_id=f"agree-{i:03d}", taken_at=at)
        shot["plasma"]["density_cm3"] *= 0.6 + 0.02 * i  # drifting off the matched density: more flags
        shot["tags"] = [["scan"], [], ["scan", "réglage"]][i % 3]
        shot["notes"] = ["", "beam étroit", "step 3 of 7"][i % 4 % 3]
        shot["daq"] = {"run": 100 + i, "gain": 0.1 + 0.2, "crate": "B"}
        if i == 37:
            shot["daq"]["counter"] = 2**70
        shots.append(shot)
    return shots


def fill(url: str, make_shot) -> None:
    factory = make_session_factory(make_engine(url))
    with factory() as session:
        create_campaign(session, CampaignCreate(slug="agree", name="agree", timezone=ZONE), "test")
    shots = week_of_shots(make_shot)
    with factory() as session:
        ingest_shots(session, "agree", shots[:30] + shots[40:], "test", max_future=LATE)
    with factory() as session:  # posted late (the last of one week, the first of the next): stored last
        ingest_shots(session, "agree", shots[30:40], "test", max_future=LATE)
    corrected = dict(shots[40], plasma={**shots[40]["plasma"], "density_cm3": shots[40]["plasma"]["density_cm3"] * 3})
    with factory() as session:  # a new revision: its flags are newer than every other shot's
        correct_shot(session, "agree", "agree-040", corrected, "test", "density typo", max_future=LATE)
    with factory() as session:
        exclude_shot(session, "agree", "agree-045", "test shot", "test")


def weekly_files(factory: sessionmaker[Session]) -> dict[str, bytes]:
    """Every file of the week: the shot CSV, the summary CSV, JSON, Parquet and HTML."""
    files = {}
    with factory() as session:
        campaign = get_campaign(session, "agree")
        buffer = io.BytesIO()
        write_shots_csv(week_shots(session, campaign, WEEK), campaign_zone(ZONE), buffer)
        files["shots.csv"] = buffer.getvalue()
        summary = build_weekly_summary(session, campaign, WEEK, now=NOW)
    buffer = io.BytesIO()
    write_summary_csv(summary, buffer)
    files["summary.csv"] = buffer.getvalue()
    for fmt in ("json", "parquet", "html"):
        buffer = io.BytesIO()
        write_export(summary, fmt, buffer)
        files[fmt] = buffer.getvalue()
    return files


@pytest.fixture
def sqlite_and_postgresql(_sqlite_template, _sqlite_dir, _pg_emptier, _pg_scratch_url) -> Iterator[list[str]]:
    _pg_emptier()
    for sqlite_url in sqlite_scratch_copy(_sqlite_template, _sqlite_dir):
        yield [sqlite_url, _pg_scratch_url]


@pytest.mark.postgres
def test_the_weekly_files_are_the_same_bytes_from_sqlite_and_from_postgresql(sqlite_and_postgresql, make_shot):
    files = []
    for url in sqlite_and_postgresql:
        fill(url, make_shot)
        engine = make_engine(url)
        try:
            files.append(weekly_files(make_session_factory(engine)))
        finally:
            engine.dispose()
    from_sqlite, from_postgresql = files
    assert from_sqlite["shots.csv"].count(b"\n") == 1 + 26 - 1  # the week's shots but the excluded one
    import re

    print(
        re.findall(rb"agree-037.{0,80}", from_sqlite["shots.csv"]),
        re.findall(rb".{200}agree-040.{0,80}", from_sqlite["json"])[:1],
        re.findall(rb"counter.{0,40}", from_sqlite["json"]),
    )
    assert b"agree-040" in from_sqlite["shots.csv"] and b"1180591620717411303424" in from_sqlite["json"]
    for name, body in from_sqlite.items():
        assert from_postgresql[name] == body, f"{name} differs between the backends"
