"""`wakeledger export`, end to end on a stored week: files, formats, progress bar,
errors, and no half-written file when writing fails."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path
from zoneinfo import ZoneInfo

import pyarrow.parquet as pq
import pytest
from sqlalchemy import select

from app.cli import main
from app.database import make_engine, make_session_factory
from app.services.weekly import table as export_table
from app.tables import Campaign
from app.times import IsoWeek
from tests.support.week_data import add_campaign, insert_shots, spread_over_week

REPO = Path(__file__).resolve().parents[2]


def _store_week(url: str) -> None:
    """1,500 shots in 2026-W47 of campaign cli-week (more than one 1,000-row piece of CSV)."""
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session, session.begin():
            campaign = add_campaign(session, "cli-week", "Europe/Zurich")
            start, _ = IsoWeek(2026, 47).bounds_utc(ZoneInfo(campaign.timezone))
            insert_shots(session, campaign, spread_over_week(start, 1500), seed=31)
    finally:
        engine.dispose()


@pytest.fixture
def database_url(filled_database_url) -> str:
    """A database of its own for each test, holding the stored week (stored once, then copied)."""
    return filled_database_url("export-cli-week", _store_week)


@pytest.fixture
def stored_week(session_factory):
    with session_factory() as session:
        return session.scalars(select(Campaign).where(Campaign.slug == "cli-week")).one()


@pytest.fixture
def out_dir(tmp_path: Path) -> Path:
    """Outputs only (tmp_path also holds the SQLite database)."""
    path = tmp_path / "out"
    path.mkdir()
    return path


def export(database_url: str, *args: str) -> int:
    return main(["--database-url", database_url, "export", *args])


@pytest.mark.parametrize("fmt", ["csv", "json", "html", "parquet"])
def test_export_writes_the_week_in_each_format_with_a_progress_bar(database_url, stored_week, out_dir, capsys, fmt):
    out = out_dir / f"week.{fmt}"
    assert export(database_url, "--campaign", "cli-week", "--week", "2026-W47", "--format", fmt, "--out", str(out)) == 0
    err = capsys.readouterr().err
    assert "[" + "#" * 30 + "] 100% 1500/1500 shots" in err
    assert f"wrote {out}: 1500 shots" in err
    if fmt == "csv":
        assert len(list(csv.DictReader(out.open(newline="")))) == 1500
    elif fmt == "json":
        assert len(json.loads(out.read_text())["shots"]) == 1500
    elif fmt == "parquet":
        assert pq.read_table(out).num_rows == 1500
    else:
        assert "2026-W47" in out.read_text()
    assert sorted(p.name for p in out_dir.iterdir()) == [out.name]  # no temporary file left


def test_the_format_follows_the_file_extension_and_a_directory_gets_the_default_name(
    database_url, stored_week, out_dir
):
    assert (
        export(database_url, "--campaign", "cli-week", "--week", "2026-W47", "--out", str(out_dir / "a.parquet")) == 0
    )
    assert pq.read_table(out_dir / "a.parquet").num_rows == 1500
    assert (
        export(database_url, "--campaign", "cli-week", "--week", "2026-W47", "--format", "csv", "--out", str(out_dir))
        == 0
    )
    assert (out_dir / "wakeledger-cli-week-2026-W47.csv").is_file()


@pytest.mark.parametrize("week", ["2026-W54", "2026-47", "W00"])
def test_a_malformed_week_exits_non_zero_with_a_message_and_writes_nothing(
    database_url, stored_week, out_dir, capsys, week
):
    out = out_dir / "week.csv"
    assert export(database_url, "--campaign", "cli-week", "--week", week, "--out", str(out)) == 2
    err = capsys.readouterr().err
    assert "wakeledger export: error: week" in err and week in err
    assert not out.exists()


def test_an_unknown_campaign_or_missing_format_exits_non_zero(database_url, stored_week, out_dir, capsys):
    assert export(database_url, "--campaign", "nope", "--week", "2026-W47", "--out", str(out_dir / "x.csv")) == 1
    assert "campaign 'nope' does not exist" in capsys.readouterr().err
    assert export(database_url, "--campaign", "cli-week", "--week", "2026-W47", "--out", str(out_dir / "x.txt")) == 2
    assert "--format" in capsys.readouterr().err
    assert export(database_url, "--campaign", "cli-week", "--out", str(out_dir / "missing" / "x.csv")) == 1
    assert "does not exist" in capsys.readouterr().err
    assert list(out_dir.iterdir()) == []


def test_a_failure_while_writing_leaves_the_previous_file_untouched_and_no_partial_file(
    database_url, stored_week, out_dir, monkeypatch
):
    out = out_dir / "week.json"
    out.write_text("previous export")

    def broken(summary, stream, progress=None):
        stream.write(b'{"half": ')
        raise RuntimeError("disk gone")

    monkeypatch.setitem(export_table.WRITERS, "json", broken)
    with pytest.raises(RuntimeError):
        export(database_url, "--campaign", "cli-week", "--week", "2026-W47", "--out", str(out))
    assert out.read_text() == "previous export"
    assert sorted(p.name for p in out_dir.iterdir()) == ["week.json"]


def test_an_empty_week_exports_a_report_that_says_so(database_url, stored_week, out_dir, capsys):
    out = out_dir / "empty.html"
    assert export(database_url, "--campaign", "cli-week", "--week", "2026-W10", "--out", str(out)) == 0
    assert "No shots were recorded in week 2026-W10" in out.read_text()
    assert "0 shots" in capsys.readouterr().err


def test_the_console_script_runs_as_a_separate_process(database_url, stored_week, out_dir, backend):
    if backend != "sqlite":
        pytest.skip("one process run is enough")
    out = out_dir / "week.csv"
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "app.cli",
            "--database-url",
            database_url,
            "export",
            "--campaign",
            "cli-week",
            "--week",
            "2026-W47",
            "--format",
            "csv",
            "--out",
            str(out),
        ],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    assert "100% 1500/1500 shots" in done.stderr
    assert len(out.read_text().splitlines()) == 1501
    bad = subprocess.run(
        [
            sys.executable,
            "-m",
            "app.cli",
            "--database-url",
            database_url,
            "export",
            "--campaign",
            "cli-week",
            "--week",
            "2026-W54",
            "--format",
            "csv",
            "--out",
            str(out),
        ],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert bad.returncode != 0 and "2026-W54" in bad.stderr
