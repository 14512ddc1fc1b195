"""The summary CSV: the week's figures (counts, ranges, phase stability, the density scale
with its interval, changes, scaling exponents) one row each, from the same export endpoint
(``table=summary``) and CLI (``--table summary``) as the shot CSV, linked from the weekly
page; the shot CSV beside it keeps its round trip through ``wakeledger import``."""

from __future__ import annotations

import csv
import io
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pytest

from app.cli import main
from app.services.weekly.summary_rows import SUMMARY_COLUMNS
from app.times import IsoWeek
from tests.support.calibration_shots import shots_from_columns, synthetic_columns
from tests.support.week_data import add_campaign, insert_shots, spread_over_week

URL = "/api/v1/campaigns/test-campaign/summary"


def rows_of(text: str) -> dict[str, dict[str, str]]:
    """The summary CSV's rows by ``section/quantity`` (each figure once)."""
    rows = list(csv.DictReader(io.StringIO(text)))
    keyed = {f"{r['section']}/{r['quantity']}": r for r in rows}
    assert len(keyed) == len(rows), "a figure appears twice"
    return keyed


@pytest.fixture
def ingested_week(client, campaign, ingest_headers, make_shot):
    """Nine model-evaluated shots in 2026-W47 and one in W46."""
    shots = [
        make_shot(case=i % 3, shot_id=f"w47-{i:03d}", taken_at=f"2026-11-{17 + i // 3}T10:{i:02d}:00Z")
        for i in range(9)
    ]
    shots.append(make_shot(case=0, shot_id="w46-000", taken_at="2026-11-12T08:00:00Z"))
    response = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    assert response.status_code == 201, response.text
    return shots


def test_a_viewer_downloads_the_summary_csv_with_its_own_file_name(client, ingested_week, viewer_headers):
    response = client.get(URL, params={"week": "2026-W47", "format": "csv", "table": "summary"}, headers=viewer_headers)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"].startswith("text/csv")
    assert (
        response.headers["content-disposition"]
        == 'attachment; filename="wakeledger-test-campaign-2026-W47-summary.csv"'
    )
    assert tuple(next(csv.reader(io.StringIO(response.text)))) == SUMMARY_COLUMNS


def test_the_summary_csv_carries_the_same_figures_as_the_json_summary(client, ingested_week, viewer_headers):
    get = {"week": "2026-W47", "format": "csv", "table": "summary"}
    rows = rows_of(client.get(URL, params=get, headers=viewer_headers).text)
    summary = client.get(URL, params={"week": "2026-W47", "format": "json"}, headers=viewer_headers).json()["summary"]
    assert rows["week/week"]["value"] == "2026-W47"
    assert rows["counts/shots"]["value"] == "9"
    assert rows["counts/shots"]["previous_week"] == "1" and rows["counts/shots"]["change"] == "8"
    for status, n in summary["status_counts"].items():
        assert rows[f"counts/status.{status}"]["value"] == str(n)
    density = next(r for r in summary["ranges"] if r["key"] == "plasma.density_cm3")
    row = rows["ranges/plasma.density_cm3"]
    assert float(row["value"]) == density["median"]
    assert (float(row["low"]), float(row["high"])) == (density["min"], density["max"])
    assert row["unit"] == "cm^-3" and row["shots"] == str(density["count"])
    assert "machine protection" in rows["week/caution"]["note"]  # the advisory caution travels too


def test_the_summary_csv_carries_the_density_scale_with_its_interval_and_each_scaling_exponent(
    client, ingested_week, viewer_headers
):
    get = {"week": "2026-W47", "format": "csv", "table": "summary"}
    rows = rows_of(client.get(URL, params=get, headers=viewer_headers).text)
    check = client.get(URL, params={"week": "2026-W47", "format": "json"}, headers=viewer_headers).json()["summary"][
        "model_check"
    ]
    scale = rows["model_check/density_scale"]
    assert scale["value"] == (
        "" if check["density_scale"]["estimate"] is None else str(check["density_scale"]["estimate"])
    )
    for bound in ("low", "high"):
        expected = check["density_scale"][bound]
        assert scale[bound] == ("" if expected is None else str(expected))
    assert "95 % interval" in scale["note"]
    for fit in check["scaling"]:
        assert f"model_check/scaling.{fit['diagnostic']}.exponent" in rows
    changes = [key for key in rows if key.startswith("model_check/change.") and key.endswith(".density_scale_after")]
    assert len(changes) == len(check["changes"])


@pytest.fixture
def calibrated_week(client, campaign, ingest_headers, reference_cases):
    """300 shots in 2026-W47 whose density scale steps from 1.015 to 1.03 half-way."""
    columns = synthetic_columns(reference_cases[0]["input"], 300, scale=1.015, scale_after=1.03, step_at=150, seed=4)
    shots = shots_from_columns(columns, datetime(2026, 11, 17, 8, tzinfo=UTC), every_s=600)
    answer = client.post(f"/api/v1/campaigns/{campaign}/shots/batch", json={"shots": shots}, headers=ingest_headers)
    assert answer.status_code == 201, answer.text
    return campaign


def number(cell: str) -> float | None:
    return float(cell) if cell else None


def test_a_week_with_a_scale_step_gives_the_interval_the_change_and_the_exponents_in_the_summary_csv(
    client, calibrated_week, viewer_headers
):
    get = {"week": "2026-W47", "format": "csv", "table": "summary"}
    rows = rows_of(client.get(URL, params=get, headers=viewer_headers).text)
    check = client.get(URL, params={"week": "2026-W47", "format": "json"}, headers=viewer_headers).json()["summary"][
        "model_check"
    ]
    scale = rows["model_check/density_scale"]
    assert number(scale["low"]) == check["density_scale"]["low"] < number(scale["value"])
    assert number(scale["value"]) == check["density_scale"]["estimate"] < number(scale["high"])
    assert number(scale["high"]) == check["density_scale"]["high"] and scale["shots"] == "300"
    (change,) = check["changes"]
    assert rows["model_check/change.1.shot_id"]["value"] == change["shot_id"]
    assert rows["model_check/change.1.taken_at"]["value"] == change["taken_at"]
    for side in ("before", "after"):
        row = rows[f"model_check/change.1.density_scale_{side}"]
        assert (number(row["value"]), number(row["low"]), number(row["high"])) == tuple(
            change[side][k] for k in ("estimate", "low", "high")
        )
    assert number(rows["model_check/change.1.standard_errors"]["value"]) == change["standard_errors"]
    for fit in check["scaling"]:
        row = rows[f"model_check/scaling.{fit['diagnostic']}.exponent"]
        assert (number(row["value"]), number(row["low"]), number(row["high"])) == (
            fit["exponent"],
            fit["exponent_low"],
            fit["exponent_high"],
        )
        assert fit["proxy"] in row["note"]


def test_an_empty_week_gives_a_summary_csv_with_zero_counts_and_empty_figures(client, campaign, viewer_headers):
    get = {"week": "2026-W47", "format": "csv", "table": "summary"}
    rows = rows_of(client.get(URL, params=get, headers=viewer_headers).text)
    assert rows["counts/shots"]["value"] == "0"
    assert rows["model_check/density_scale"]["value"] == "" and rows["ranges/plasma.density_cm3"]["value"] == ""


def test_the_shot_csv_is_still_the_default_and_table_shots_is_the_same_file(client, ingested_week, viewer_headers):
    default = client.get(URL, params={"week": "2026-W47", "format": "csv"}, headers=viewer_headers)
    shots = client.get(URL, params={"week": "2026-W47", "format": "csv", "table": "shots"}, headers=viewer_headers)
    assert default.status_code == shots.status_code == 200
    assert default.content == shots.content
    assert "shot_id" in default.text.splitlines()[0] and len(default.text.splitlines()) == 10


@pytest.mark.parametrize(
    ("params", "field"), [({"table": "figures"}, "table"), ({"format": "json", "table": "summary"}, "table")]
)
def test_an_unknown_table_or_a_summary_table_in_another_format_gets_422(
    client, campaign, viewer_headers, params, field
):
    response = client.get(URL, params={"week": "2026-W47", "format": "csv", **params}, headers=viewer_headers)
    assert response.status_code == 422
    assert [e["field"] for e in response.json()["errors"]] == [field]


def test_the_weekly_page_links_to_both_csv_files_and_the_link_gives_the_summary_csv(
    client, ingested_week, viewer_headers
):
    page = client.get(URL, params={"week": "2026-W47", "format": "html"}, headers=viewer_headers)
    assert page.status_code == 200
    assert 'href="?week=2026-W47&amp;format=csv&amp;table=summary"' in page.text
    assert 'href="?week=2026-W47&amp;format=csv"' in page.text
    # the link is relative to the page: the same endpoint with the summary table
    linked = client.get(f"{URL}?week=2026-W47&format=csv&table=summary", headers=viewer_headers)
    assert linked.status_code == 200 and "counts" in linked.text


# ---- the CLI ----------------------------------------------------------------------------


@pytest.fixture
def stored_week(session_factory):
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "cli-week", "Europe/Zurich")
        start, _ = IsoWeek(2026, 47).bounds_utc(ZoneInfo(campaign.timezone))
        insert_shots(session, campaign, spread_over_week(start, 300), seed=31)
    return campaign


def export(database_url: str, *args: str) -> int:
    return main(["--database-url", database_url, "export", "--campaign", "cli-week", "--week", "2026-W47", *args])


def test_the_cli_writes_the_summary_csv_beside_the_shot_csv_under_its_own_name(
    database_url, stored_week, tmp_path, capsys
):
    out = tmp_path / "out"
    out.mkdir()
    assert export(database_url, "--format", "csv", "--out", str(out)) == 0
    assert export(database_url, "--table", "summary", "--out", str(out)) == 0  # CSV: the summary's one format
    err = capsys.readouterr().err
    assert f"wrote {out / 'wakeledger-cli-week-2026-W47-summary.csv'}: 300 shots" in err
    assert sorted(p.name for p in out.iterdir()) == [
        "wakeledger-cli-week-2026-W47-summary.csv",
        "wakeledger-cli-week-2026-W47.csv",
    ]
    rows = rows_of((out / "wakeledger-cli-week-2026-W47-summary.csv").read_text())
    assert rows["counts/shots"]["value"] == "300"
    assert "model_check/density_scale" in rows
    assert len((out / "wakeledger-cli-week-2026-W47.csv").read_text().splitlines()) == 301


def test_the_cli_refuses_a_summary_table_in_another_format_and_writes_nothing(
    database_url, stored_week, tmp_path, capsys
):
    out = tmp_path / "figures.json"
    assert export(database_url, "--table", "summary", "--out", str(out)) == 2
    assert "wakeledger export: error: the summary table is a CSV file" in capsys.readouterr().err
    assert not out.exists()


def test_the_report_written_by_the_cli_names_the_summary_csv(database_url, stored_week, tmp_path):
    out = tmp_path / "week.html"
    assert export(database_url, "--out", str(out)) == 0
    text = out.read_text()
    assert "wakeledger-cli-week-2026-W47-summary.csv" in text and "?week=" not in text


def test_the_shot_csv_still_imports_unchanged_and_the_summary_csv_is_not_taken_for_shots(
    database_url, stored_week, session_factory, tmp_path, capsys
):
    with session_factory() as session, session.begin():
        add_campaign(session, "cli-copy", "Europe/Zurich")
    shots_csv, summary_csv = tmp_path / "shots.csv", tmp_path / "figures.csv"
    assert export(database_url, "--out", str(shots_csv)) == 0
    assert export(database_url, "--table", "summary", "--out", str(summary_csv)) == 0
    capsys.readouterr()
    assert main(["--database-url", database_url, "import", "--campaign", "cli-copy", str(shots_csv)]) == 0
    assert "cli-copy: stored 300, unchanged 0, conflicts 0, failed 0 (of 300 rows)" in capsys.readouterr().out
    assert main(["--database-url", database_url, "import", "--campaign", "cli-copy", str(summary_csv)]) != 0
    assert "summary table (one row per figure), not shots" in capsys.readouterr().err
    assert main(["--database-url", database_url, "import", "--campaign", "cli-copy", str(shots_csv)]) == 0
    assert "cli-copy: stored 0, unchanged 300, conflicts 0, failed 0" in capsys.readouterr().out
