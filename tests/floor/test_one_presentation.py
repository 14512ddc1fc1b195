"""One presentation layer: a value reads the same on every screen and in every file.

Each test reproduces an inconsistency measured on the service before the floor was
renovated (numbers, missing values, colours, time zones, CSV conventions) and holds
the one rule now in force.
"""

from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

import pyarrow.parquet as pq
import pytest
from sqlalchemy import update

from app.presentation import palette
from app.presentation.numbers import MISSING, format_delta, format_number
from app.tables import Campaign
from tests.support.sessions import sign_in

SLUG = "test-campaign"
WEEK = "2026-W47"
STATIC = Path(__file__).resolve().parents[2] / "app" / "static"


# ------------------------------------------------------------------------ numbers


@pytest.mark.parametrize(
    ("value", "text"),
    [
        (5.8e14, "5.8e+14"),
        (1.2346e-4, "1.235e-4"),
        (0.0, "0"),
        (-0.5, "-0.5"),
        (2.5, "2.5"),
        (12.3456, "12.35"),
        (99999.0, "99999"),
        (100000.0, "1e+5"),
        (12345, "12,345"),
        (999, "999"),
        (None, MISSING),
        (float("nan"), MISSING),
        (float("inf"), MISSING),
    ],
)
def test_one_rule_writes_every_number_shown(value, text):
    assert format_number(value) == text


def test_a_unit_follows_the_number_and_a_change_carries_its_sign():
    assert format_number(0.1764, "rad") == "0.1764 rad"
    assert format_delta(3) == "+3" and format_delta(-0.25, "rad") == "\u22120.25 rad" and format_delta(0) == "\u00b10"
    assert format_delta(None) == MISSING


def _post(client, headers, make_shot, shot_id, minute, changes, **extra):
    shot = make_shot(0, shot_id=shot_id, taken_at=f"2026-11-17T09:{minute:02d}:00Z", changes=changes)
    shot.update(extra)
    response = client.post(f"/api/v1/campaigns/{SLUG}/shots", json=shot, headers=headers)
    assert response.status_code == 201, response.text


@pytest.fixture
def odd_numbers(client, campaign, admin_headers, make_shot):
    """One shot at 5.8e14 cm^-3 with its seed 1.2346e-4 mm behind the front, one unseeded."""
    _post(client, admin_headers, make_shot, "odd-1", 0, {"plasma.density_cm3": 5.8e14, "seed.position_mm": 1.2346e-4})
    _post(
        client,
        admin_headers,
        make_shot,
        "odd-2",
        5,
        {"plasma.density_cm3": 5.8e14, "seed.method": "none", "seed.position_mm": None},
    )
    return SLUG


def _cells(html: str, shot_id: str) -> list[str]:
    row = re.search(rf'<tr>\s*<td class="nowrap"><a class="mono" href="[^"]*/{shot_id}">.*?</tr>', html, re.S)
    assert row, shot_id
    return [re.sub(r"<[^>]+>", "", c).strip() for c in re.findall(r'<td class="num">(.*?)</td>', row.group(0), re.S)]


def test_a_number_reads_the_same_in_a_served_row_a_live_row_and_the_report(client, odd_numbers, admin_token):
    # Measured before: 5.8e+14 served, 5.800e+14 live; 1.2346e-4 read 0.0001235 served,
    # 1.235e-4 live and 0.000123 in the report; a missing value was an em dash on the
    # dashboard and an en dash in the report.
    sign_in(client, admin_token)
    served = _cells(client.get(f"/campaigns/{SLUG}/shots").text, "odd-1")
    unseeded = _cells(client.get(f"/campaigns/{SLUG}/shots").text, "odd-2")
    live = {s["shot_id"]: s["text"] for s in client.get(f"/campaigns/{SLUG}/live", params={"since": 0}).json()["shots"]}
    assert served[0] == live["odd-1"]["plasma_density_cm3"] == "5.8e+14"
    assert served[3] == live["odd-1"]["seed_position_mm"] == "1.235e-4"
    assert unseeded[3] == live["odd-2"]["seed_position_mm"] == MISSING
    report = client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK, "format": "html"}).text
    density_row = re.search(r"<code>plasma\.density_cm3</code>.*?</tr>", report, re.S).group(0)
    assert density_row.count(">5.8e+14<") == 3  # min, median and max
    seed_row = re.search(r"<code>seed\.position_mm</code>.*?</tr>", report, re.S).group(0)
    assert ">1.235e-4<" in seed_row
    assert ">\u2013<" not in report and f">{MISSING}<" in report  # a missing value is an em dash here too


def test_the_csv_files_carry_the_stored_number_unrounded_and_identically(client, odd_numbers, admin_token):
    sign_in(client, admin_token)
    table = list(csv.DictReader(io.StringIO(client.get(f"/campaigns/{SLUG}/shots.csv").text)))
    weekly = list(
        csv.DictReader(
            io.StringIO(client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK, "format": "csv"}).text)
        )
    )
    by_id = {r["shot_id"]: r for r in weekly}
    for row in table:
        assert row == by_id[row["shot_id"]]  # the same table: same headers, same cells
    odd = by_id["odd-1"]
    assert float(odd["plasma_density_cm3 [cm^-3]"]) == 5.8e14 and float(odd["seed_position_mm [mm]"]) == 1.2346e-4
    assert by_id["odd-2"]["seed_position_mm [mm]"] == ""


# ------------------------------------------------------------------------ colours


def test_one_palette_feeds_the_page_css_the_page_script_and_the_report(client, odd_numbers, admin_token):
    # Measured before: the marginal colour was #9a6a00 in the dashboard CSS and #8a6500 in the report.
    served = client.get("/assets/palette.css")
    assert served.status_code == 200 and served.headers["content-type"].startswith("text/css")
    assert served.text.strip() == palette.css_variables()
    for style in palette.STATUS_STYLES.values():
        assert (
            f"--{style.name}: {style.colour};" in served.text and f"--{style.name}-text: {style.text};" in served.text
        )
    report = client.get(
        f"/api/v1/campaigns/{SLUG}/summary",
        params={"week": WEEK, "format": "html"},
        headers={"Authorization": f"Bearer {admin_token}"},
    ).text
    assert palette.css_variables() in report
    css = (STATIC / "css" / "wakeledger.css").read_text().lower()
    script = (STATIC / "js" / "wakeledger.js").read_text()
    hexes = {c.lower() for s in palette.STATUS_STYLES.values() for c in (s.colour, s.text, s.tint)}
    hexes |= {"#9a6a00", "#8a6500", "#b34a00", "#a34400", "#7d5600"}
    assert not [h for h in hexes if h in css or h in script.lower()]
    assert not [g for g in palette.GLYPHS.values() if g in script or g.encode("unicode_escape").decode() in script]
    sign_in(client, admin_token)
    page = client.get(f"/campaigns/{SLUG}").text
    block = re.search(r'<script type="application/json" id="presentation">(.*?)</script>', page, re.S).group(1)
    assert json.loads(block) == {"glyphs": palette.GLYPHS}
    assert '<link rel="stylesheet" href="/assets/palette.css">' in page
    feed = client.get(f"/campaigns/{SLUG}/charts/timeline.json").json()["figure"]
    points = [t for t in feed["data"] if t.get("meta") and not t["meta"].get("pinned")]
    # flagged shots are markers; nominal shots one thin line of the same palette colour
    colours = {t["meta"]["status"]: t["marker"]["color"] if "marker" in t else t["line"]["color"] for t in points}
    assert colours == {
        name: s.colour if name != "nominal" else palette.rgba(s.colour, 0.55)
        for name, s in palette.STATUS_STYLES.items()
    }


# ---------------------------------------------------------------------- time zone


def test_a_campaign_with_an_unknown_time_zone_reads_in_utc_on_the_dashboard_and_in_the_summary(
    app, client, odd_numbers, admin_token
):
    # Measured before: the dashboard fell back to UTC while the summary raised (a 500).
    with app.state.session_factory() as session, session.begin():
        session.execute(update(Campaign).where(Campaign.slug == SLUG).values(timezone="Mars/Olympus_Mons"))
    sign_in(client, admin_token)
    for path in (
        f"/campaigns/{SLUG}",
        f"/campaigns/{SLUG}/shots",
        f"/campaigns/{SLUG}/shots/odd-1",
        f"/campaigns/{SLUG}/charts/timeline.json",
        f"/campaigns/{SLUG}/shots.csv",
    ):
        assert client.get(path).status_code == 200, path
    assert "taken at (UTC)" in json.dumps(client.get(f"/campaigns/{SLUG}/charts/timeline.json").json())
    for fmt in ("json", "csv", "html", "parquet"):
        response = client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK, "format": fmt})
        assert response.status_code == 200, (fmt, response.text[:200])
    summary = client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK}).json()["summary"]
    assert summary["campaign"]["timezone"] == "UTC" and summary["shot_count"] == 2
    assert summary["start_local"] == "2026-11-16T00:00:00Z"


# ------------------------------------------------------------------ CSV convention


def test_the_table_download_and_the_weekly_csv_follow_one_convention(client, odd_numbers, admin_token):
    # Measured before: the table download joined flags with ';' and had no units in its
    # headers; the weekly CSV joined them with '; ' and had units.
    sign_in(client, admin_token)
    table = list(csv.reader(io.StringIO(client.get(f"/campaigns/{SLUG}/shots.csv").text)))
    weekly = list(
        csv.reader(
            io.StringIO(client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK, "format": "csv"}).text)
        )
    )
    assert table[0] == weekly[0]
    header = table[0]
    assert "plasma_density_cm3 [cm^-3]" in header and "efolds_exit [e-folds]" in header and "flag_codes" in header
    assert "flags" not in header
    rows = [dict(zip(header, r, strict=True)) for r in table[1:]]
    assert all(r["taken_at"].endswith("Z") and re.search(r"(Z|[+-]\d\d:\d\d)$", r["taken_at_local"]) for r in rows)
    flagged = [r["flag_codes"] for r in rows if r["flag_codes"]]
    assert flagged and all("; " not in f and re.fullmatch(r"[A-Z_]+:\w+(;[A-Z_]+:\w+)*", f) for f in flagged)


# ---------------------------------------------------------- formula injection (issue 12)


@pytest.fixture
def hostile_notes(client, campaign, admin_headers, make_shot):
    _post(
        client,
        admin_headers,
        make_shot,
        "hostile-1",
        0,
        {},
        notes='=HYPERLINK("http://example.invalid/?x=1","open me")',
        tags=["=1+1", "plain"],
    )
    return SLUG


def _assert_defused(rows: list[dict[str, str]]) -> None:
    [row] = [r for r in rows if r["shot_id"] == "hostile-1"]
    assert row["notes"] == '\'=HYPERLINK("http://example.invalid/?x=1","open me")'
    assert row["tags"] == "'=1+1;plain"


def test_no_csv_export_lets_a_spreadsheet_run_a_note_or_a_tag_as_a_formula(
    client, hostile_notes, admin_token, database_url, tmp_path
):
    sign_in(client, admin_token)
    _assert_defused(list(csv.DictReader(io.StringIO(client.get(f"/campaigns/{SLUG}/shots.csv").text))))
    api = client.get(f"/api/v1/campaigns/{SLUG}/summary", params={"week": WEEK, "format": "csv"})
    _assert_defused(list(csv.DictReader(io.StringIO(api.text))))
    from app.cli import main

    out = tmp_path / "week.csv"
    assert main(["--database-url", database_url, "export", "--campaign", SLUG, "--week", WEEK, "--out", str(out)]) == 0
    _assert_defused(list(csv.DictReader(out.open(newline="", encoding="utf-8"))))


# ----------------------------------------------- other sections kept (issue 15, item 9)


def test_the_sections_a_daq_adds_stay_with_the_shot_in_every_export(
    client, campaign, admin_headers, make_shot, admin_token
):
    _post(client, admin_headers, make_shot, "daq-1", 0, {}, daq={"run": 4711, "crate": "B2", "ok": True})
    _post(client, admin_headers, make_shot, "daq-2", 5, {}, operator="night shift")
    sign_in(client, admin_token)
    params = {"week": WEEK}
    rows = {
        r["shot_id"]: r
        for r in csv.DictReader(
            io.StringIO(client.get(f"/api/v1/campaigns/{SLUG}/summary", params={**params, "format": "csv"}).text)
        )
    }
    assert (rows["daq-1"]["daq.run"], rows["daq-1"]["daq.crate"], rows["daq-1"]["daq.ok"]) == ("4711", "B2", "true")
    assert rows["daq-2"]["daq.run"] == "" and rows["daq-2"]["operator"] == "night shift"
    table = {r["shot_id"]: r for r in csv.DictReader(io.StringIO(client.get(f"/campaigns/{SLUG}/shots.csv").text))}
    assert table["daq-1"]["daq.run"] == "4711" and table["daq-2"]["operator"] == "night shift"
    parquet = pq.read_table(
        io.BytesIO(client.get(f"/api/v1/campaigns/{SLUG}/summary", params={**params, "format": "parquet"}).content)
    )
    assert str(parquet.schema.field("daq.run").type) == "int64" and "flag_codes" in parquet.column_names
    columns = parquet.to_pydict()
    at = columns["shot_id"].index("daq-1")
    assert (columns["daq.run"][at], columns["daq.crate"][at], columns["daq.ok"][at]) == (4711, "B2", True)
    records = {r["shot_id"]: r for r in client.get(f"/api/v1/campaigns/{SLUG}/summary", params=params).json()["shots"]}
    assert records["daq-1"]["daq"] == {"run": 4711, "crate": "B2", "ok": True}
    assert records["daq-2"]["operator"] == "night shift" and "daq" not in records["daq-2"]
