"""Every export format, parsed back with an ordinary reader (csv, json, pyarrow,
html.parser) and compared with the stored shots and the summary."""

from __future__ import annotations

import csv
import io
import json
import math
from html.parser import HTMLParser
from zoneinfo import ZoneInfo

import pyarrow.parquet as pq
import pytest
from sqlalchemy import select

import model
from app.advisory import ADVISORY_CAUTION
from app.services.export_table import INPUT_PATHS
from app.services.weekly.summary import build_weekly_summary
from app.services.weekly.table import render_export, summary_document
from app.tables import Evaluation, Flag, Shot
from app.times import IsoWeek
from tests.support.week_data import add_campaign, insert_shots, spread_over_week

WEEK = IsoWeek(2026, 47)


@pytest.fixture
def week_summary(session_factory):
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "formats", "America/Chicago")
        start, _ = WEEK.bounds_utc(ZoneInfo(campaign.timezone))
        insert_shots(session, campaign, spread_over_week(start, 150), seed=21)
    with session_factory() as session:
        summary = build_weekly_summary(session, campaign, WEEK)
        stored = {}
        for shot in session.scalars(select(Shot).where(Shot.campaign_id == campaign.id)):
            flags = list(session.scalars(select(Flag).where(Flag.shot_pk == shot.id).order_by(Flag.id)))
            stored[shot.shot_id] = (shot, session.get(Evaluation, shot.id), flags)
    return summary, stored


@pytest.fixture
def empty_summary(session_factory):
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "nothing", "Europe/Zurich")
    with session_factory() as session:
        return build_weekly_summary(session, campaign, WEEK)


def stored_value(row, key):
    shot, evaluation, _ = row
    return getattr(shot, model.column_name(key)) if key in INPUT_PATHS else getattr(evaluation, key)


def same_number(cell, expected) -> bool:
    if expected is None:
        return cell in ("", None) or (isinstance(cell, float) and math.isnan(cell))
    return float(cell) == float(expected)


def test_csv_has_one_row_per_shot_with_units_in_the_headers_and_the_stored_values(week_summary):
    summary, stored = week_summary
    rows = list(csv.DictReader(io.StringIO(render_export(summary, "csv").decode("utf-8"))))
    assert len(rows) == len(stored) == 150
    header = rows[0].keys()
    for expected in (
        "plasma_density_cm3 [cm^-3]",
        "driver_sigma_z_mm [mm]",
        "driver_species",
        "seed_method",
        "efolds_exit [e-folds]",
        "wakefield_estimate_mv_m [MV/m]",
        "frequency_mismatch_pct [%]",
        "density_ratio",
        "status",
        "flag_codes",
        "taken_at",
    ):
        assert expected in header
    assert "flags" not in header  # pandas' DataFrame.flags would shadow it
    units = {h.split(" [")[0]: h for h in header}
    for row in rows:
        shot, evaluation, flags = stored[row["shot_id"]]
        assert row["status"] == evaluation.status
        assert row["flag_codes"] == ";".join(f"{f.code}:{f.severity}" for f in flags)
        assert row["notes"] == shot.notes
        assert row["driver_species"] == shot.driver_species and row["seed_method"] == shot.seed_method
        for key in (*INPUT_PATHS, *model.OUTPUT_NAMES):
            if key in ("driver.species", "seed.method"):
                continue
            assert same_number(row[units[model.column_name(key)]], stored_value(stored[row["shot_id"]], key)), key


def test_json_holds_the_summary_and_every_shot_with_its_flags(week_summary):
    summary, stored = week_summary
    doc = json.loads(render_export(summary, "json"))
    assert doc["summary"]["week"] == "2026-W47" and doc["summary"]["shot_count"] == 150
    assert doc["summary"]["status_counts"] == summary.status_counts
    assert doc["summary"]["campaign"]["timezone"] == "America/Chicago"
    assert doc["summary"]["caution"] == ADVISORY_CAUTION
    assert doc["units"]["plasma.density_cm3"] == "cm^-3"
    assert [s["shot_id"] for s in doc["summary"]["flagged_shots"]] == [f.shot_id for f in summary.flagged_shots]
    assert len(doc["shots"]) == 150
    for record in doc["shots"]:
        row = stored[record["shot_id"]]
        shot, evaluation, flags = row
        assert record["evaluation"]["status"] == evaluation.status
        assert record["plasma"]["density_cm3"] == shot.plasma_density_cm3
        assert record["seed"]["method"] == shot.seed_method
        assert record["measured"]["modulation_phase_rad"] == shot.measured_modulation_phase_rad
        assert record["tags"] == shot.tags
        for name in model.OUTPUT_NAMES:
            assert record["evaluation"][name] == getattr(evaluation, name), name
        assert [(f["code"], f["severity"], f["message"]) for f in record["evaluation"]["flags"]] == [
            (f.code, f.severity, f.message) for f in flags
        ]


def test_parquet_reads_back_in_pyarrow_with_typed_columns_units_and_the_summary(week_summary):
    summary, stored = week_summary
    table = pq.read_table(io.BytesIO(render_export(summary, "parquet")))
    assert table.num_rows == 150
    assert table.schema.field("plasma_density_cm3").metadata[b"unit"] == b"cm^-3"
    assert str(table.schema.field("taken_at").type) == "timestamp[us, tz=UTC]"
    assert json.loads(table.schema.metadata[b"wakeledger.summary"])["shot_count"] == 150
    columns = table.to_pydict()
    for i, shot_id in enumerate(columns["shot_id"]):
        row = stored[shot_id]
        shot, evaluation, flags = row
        assert columns["status"][i] == evaluation.status
        assert columns["taken_at"][i] == summary.shots.taken_at[i]
        assert [f["code"] for f in columns["flag_codes"][i]] == [f.code for f in flags]
        for key in (*INPUT_PATHS, *model.OUTPUT_NAMES):
            column = model.column_name(key) if key in INPUT_PATHS else key
            if key in ("driver.species", "seed.method"):
                assert columns[column][i] == stored_value(row, key)
            else:
                assert same_number(columns[column][i], stored_value(row, key)), key


class _ReportReader(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.text: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.styles: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        self._in_style = False

    def handle_data(self, data):
        (self.styles if self._in_style else self.text).append(data)

    @property
    def words(self) -> str:
        return " ".join(" ".join(self.text).split())


def read_report(summary) -> _ReportReader:
    reader = _ReportReader()
    reader.feed(render_export(summary, "html").decode("utf-8"))
    reader.close()
    return reader


def test_html_report_is_self_contained_prints_cleanly_and_shows_the_figures(week_summary):
    summary, _ = week_summary
    report = read_report(summary)
    names = [t for t, _ in report.tags]
    assert "script" not in names and "link" not in names and "img" not in names  # nothing to fetch
    assert not any(v and "://" in v for _, attrs in report.tags for k, v in attrs.items() if k in ("src", "href"))
    assert names.count("svg") >= 4  # charts drawn inline
    assert "@media print" in " ".join(report.styles)
    words = report.words
    assert "2026-W47" in words and summary.campaign_name in words and "America/Chicago" in words
    assert " ".join(ADVISORY_CAUTION.split()) in words
    assert f"all shots {summary.shot_count}" in words
    for status in ("nominal", "marginal", "outside"):
        assert f"{status} {summary.status_counts[status]}" in words
    for flagged in summary.flagged_shots:
        assert flagged.shot_id in words
        for reason in flagged.reasons:
            assert reason.message in words
    assert "No shots were recorded" not in words


def test_an_empty_week_gives_valid_exports_that_say_so(empty_summary):
    report = read_report(empty_summary)
    assert "No shots were recorded in week 2026-W47" in report.words
    assert "all shots 0" in report.words
    rows = list(csv.reader(io.StringIO(render_export(empty_summary, "csv").decode("utf-8"))))
    assert len(rows) == 1 and "plasma_density_cm3 [cm^-3]" in rows[0]
    doc = json.loads(render_export(empty_summary, "json"))
    assert doc["summary"]["empty"] is True and doc["shots"] == []
    table = pq.read_table(io.BytesIO(render_export(empty_summary, "parquet")))
    assert table.num_rows == 0 and "plasma_density_cm3" in table.column_names


def test_summary_document_is_strict_json_without_nan(week_summary):
    summary, _ = week_summary
    text = json.dumps(summary_document(summary), allow_nan=False)
    assert "NaN" not in text


# The flagged-shot sentences as the report's template wrote them before they were written in Python
# (app.services.weekly.report.sentences_html): the reference its bytes are held to.
TEMPLATE_SENTENCES = """{% for g in groups %}
<div class="sentence">
  <p>{% if g.code %}<code>{{ g.code }}</code> <span class="status {{ g.severity }}">{{ g.severity }}</span>: {{ g.message }}{% else %}<span class="note">no stored flag</span>{% endif %}
    <span class="note">— {{ g.shots | length }} shot{{ "" if g.shots | length == 1 else "s" }}</span></p>
  <p class="shots">{{ shot_list(g.shots, limit) }}
  {% if g.shots | length > limit %}<span class="note">and {{ g.shots | length - limit }} more</span>{% endif %}</p>
</div>
{% endfor %}
"""  # noqa: E501


def test_the_reports_flag_sentences_are_the_markup_the_template_wrote_with_hostile_texts_escaped():
    """Each flag sentence once with its shots, as the template wrote it, byte for byte: texts that need
    escaping (shot ids and messages with <, &, quotes), a shot without a stored flag, a sentence with more
    shots than the report lists, and local times across a daylight-saving change."""
    from datetime import UTC, datetime, timedelta

    import jinja2
    from markupsafe import Markup

    from app.services.weekly.report import sentence_groups, sentences_html, shot_cells
    from app.services.weekly.summary import FlaggedShot
    from app.store.exports import FlagRow
    from app.times import local_text

    zone = ZoneInfo("Europe/Zurich")
    start = datetime(2026, 10, 24, 22, 30, 0, 250_000, tzinfo=UTC)  # the last Sunday of October: 03:00 -> 02:00
    sentences = ['weak <seed> & "noise"', "it's slow", "ok"]
    shots = []
    for i in range(40):
        reasons = [
            FlagRow(i, code, "marginal" if i % 3 else "outside", None, None, sentences[(i + j) % 3])
            for j, code in enumerate(("WEAK_SEED", "SLOW<DRIVER>")[: i % 3])
        ]
        when = start + timedelta(minutes=17 * i)
        shots.append(FlaggedShot(f"s-{i}<b>&'\"" if i % 7 == 0 else f"s-{i}", when, "outside", reasons))
    groups = sentence_groups(shots)
    assert any(not g.code for g in groups) and max(len(g.shots) for g in groups) > 5

    def shot_list(listed, limit):  # the template's shot lists, one cell per shot
        return Markup(", ").join(
            Markup('<code title="{}">{}</code>').format(local_text(s.taken_at, zone), s.shot_id) for s in listed[:limit]
        )

    environment = jinja2.Environment(autoescape=True, trim_blocks=True, lstrip_blocks=True)
    for limit in (5, 500):
        expected = environment.from_string(TEMPLATE_SENTENCES).render(groups=groups, shot_list=shot_list, limit=limit)
        written = sentences_html(groups, shot_cells(shots, zone), limit)
        assert str(written) + "\n" == expected
