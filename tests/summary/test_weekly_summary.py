"""The weekly summary's figures, checked against an independent computation over the
stored shots (plain Python `statistics` over rows read back with the ORM, and the week
found by each shot's own local ISO calendar date)."""

from __future__ import annotations

import math
import statistics
from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import pytest
from sqlalchemy import select

import model
from app.services.phase_spread import JITTER_SOURCES
from app.services.weekly.summary import build_weekly_summary
from app.tables import Evaluation, Flag, Shot
from app.times import IsoWeek, WeekFormatError
from tests.support import shot_to_shot_reference as reference
from tests.support.week_data import add_campaign, insert_shots, spread_over_week

WEEK = IsoWeek(2026, 47)


def stored_week(session, campaign, week: IsoWeek):
    """(shot, evaluation, flags) of every stored shot whose local date is in `week`."""
    tz = ZoneInfo(campaign.timezone)
    out = []
    for shot in session.scalars(select(Shot).where(Shot.campaign_id == campaign.id)):
        taken = shot.taken_at if shot.taken_at.tzinfo else shot.taken_at.replace(tzinfo=UTC)
        iso = taken.astimezone(tz).isocalendar()
        if (iso.year, iso.week) == (week.year, week.week):
            flags = list(session.scalars(select(Flag).where(Flag.shot_pk == shot.id)))
            out.append((shot, session.get(Evaluation, shot.id), flags))
    return out


def value_of(shot, evaluation, key: str):
    if "." in key:  # inputs are dotted paths, outputs plain names
        return getattr(shot, model.column_name(key))
    return getattr(evaluation, key)


def close(a, b) -> bool:
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-12)


@pytest.fixture
def zurich_weeks(session_factory):
    """2026-W47 with 600 shots and 2026-W46 with 250, campaign in Europe/Zurich."""
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "zurich", "Europe/Zurich")
        tz = ZoneInfo(campaign.timezone)
        start, _ = WEEK.bounds_utc(tz)
        insert_shots(session, campaign, spread_over_week(start, 600), seed=11)
        prev_start, _ = WEEK.previous().bounds_utc(tz)
        insert_shots(session, campaign, spread_over_week(prev_start, 250), seed=12, prefix="p")
    return campaign


def test_counts_and_ranges_match_a_plain_python_computation_over_the_stored_shots(session_factory, zurich_weeks):
    with session_factory() as session:
        summary = build_weekly_summary(session, zurich_weeks, WEEK)
        rows = stored_week(session, zurich_weeks, WEEK)

    assert summary.shot_count == len(rows) == 600
    for status in ("nominal", "marginal", "outside"):
        assert summary.status_counts[status] == sum(1 for _, e, _ in rows if e.status == status)
    for code, by_severity in summary.flag_counts.items():
        for severity, n in by_severity.items():
            assert n == sum(1 for *_, flags in rows if any(f.code == code and f.severity == severity for f in flags)), (
                code,
                severity,
            )
    assert sum(summary.flag_counts["UNSEEDED"].values()) == sum(1 for s, _, _ in rows if s.seed_method == "none")

    for r in summary.ranges:
        values = [v for s, e, _ in rows if (v := value_of(s, e, r.key)) is not None]
        assert r.count == len(values), r.key
        assert close(r.min, min(values)) and close(r.max, max(values)), r.key
        assert close(r.median, statistics.median(values)), r.key


def test_flagged_shots_are_the_outside_then_marginal_shots_with_their_flags_as_reasons(session_factory, zurich_weeks):
    with session_factory() as session:
        summary = build_weekly_summary(session, zurich_weeks, WEEK)
        rows = stored_week(session, zurich_weeks, WEEK)
    by_id = {s.shot_id: (e, flags) for s, e, flags in rows}
    outside = [f for f in summary.flagged_shots if f.status == "outside"]
    marginal = [f for f in summary.flagged_shots if f.status == "marginal"]
    assert summary.flagged_shots == outside + marginal
    assert len(outside) == summary.status_counts["outside"] and len(marginal) == summary.status_counts["marginal"]
    for flagged in summary.flagged_shots:
        evaluation, flags = by_id[flagged.shot_id]
        assert evaluation.status == flagged.status
        expected = sorted((f.code, f.severity, f.message) for f in flags if f.severity != "info")
        assert sorted((r.code, r.severity, r.message) for r in flagged.reasons) == expected
        assert any(r.severity == flagged.status for r in flagged.reasons)


def test_phase_stability_and_density_calibration_figures(session_factory, zurich_weeks):
    with session_factory() as session:
        summary = build_weekly_summary(session, zurich_weeks, WEEK)
        rows = stored_week(session, zurich_weeks, WEEK)

    # The overview's selection: evaluated shots with a measured phase, in time order.
    in_time_order = sorted(rows, key=lambda row: (row[0].taken_at, row[0].id))
    chosen = [s for s, e, _ in in_time_order if s.measured_modulation_phase_rad is not None and e is not None]
    phases = [s.measured_modulation_phase_rad for s in chosen]
    p = summary.phase_stability
    assert p.measured_count == len(phases) and len(phases) >= reference.WINDOW
    assert math.isclose(p.measured_phase_std_rad, reference.phase_jitter_rad(phases), rel_tol=1e-9)
    for path in JITTER_SOURCES:
        logged = [getattr(s, model.column_name(path)) for s in chosen]
        assert math.isclose(p.spread_pct[path], 100 * reference.log_jitter(logged), rel_tol=1e-9, abs_tol=1e-12)
        part = abs(p.phase_per_ln_rad[path]) * p.spread_pct[path] / 100
        assert math.isclose(p.expected_by_source_rad[path], part, rel_tol=1e-9, abs_tol=1e-15)
    assert math.isclose(p.density_spread_pct, p.spread_pct["plasma.density_cm3"], rel_tol=1e-12)
    assert math.isclose(p.phase_per_pct_density_rad, abs(p.phase_per_ln_rad["plasma.density_cm3"]) / 100, rel_tol=1e-12)
    rss = math.sqrt(sum(v * v for v in p.expected_by_source_rad.values()))
    assert math.isclose(p.expected_phase_jitter_rad, rss, rel_tol=1e-9)
    assert math.isclose(p.measured_over_expected, p.measured_phase_std_rad / rss, rel_tol=1e-9)

    measured = [(s, e) for s, e, _ in rows if e.implied_density_cm3 is not None]
    mismatch = [e.frequency_mismatch_pct for _, e in measured]
    d = summary.density_calibration
    assert d.measured_count == len(measured)
    assert math.isclose(
        d.median_implied_offset_pct,
        statistics.median(100 * (e.implied_density_cm3 / s.plasma_density_cm3 - 1) for s, e in measured),
        rel_tol=1e-9,
    )
    assert math.isclose(
        d.median_implied_offset_cm3,
        statistics.median(e.implied_density_cm3 - s.plasma_density_cm3 for s, e in measured),
        rel_tol=1e-9,
    )
    assert math.isclose(d.frequency_mismatch_mean_pct, statistics.fmean(mismatch), rel_tol=1e-9)
    assert math.isclose(d.frequency_mismatch_std_pct, statistics.stdev(mismatch), rel_tol=1e-9)


def test_change_against_the_previous_week_is_given_as_deltas(session_factory, zurich_weeks):
    with session_factory() as session:
        summary = build_weekly_summary(session, zurich_weeks, WEEK)
        previous = build_weekly_summary(session, zurich_weeks, WEEK.previous())
    comparison = summary.previous
    assert comparison.week == IsoWeek(2026, 46)
    assert comparison.shot_count == previous.shot_count == 250
    assert comparison.delta_shot_count == 600 - 250
    for status in ("nominal", "marginal", "outside"):
        assert comparison.status_counts[status] == previous.status_counts[status]
        assert comparison.delta_status_counts[status] == summary.status_counts[status] - previous.status_counts[status]
    for code in summary.flag_counts:
        now, before = sum(summary.flag_counts[code].values()), sum(previous.flag_counts[code].values())
        assert comparison.delta_flag_shot_counts[code] == now - before
    prev_medians = {r.key: r.median for r in previous.ranges}
    for r in summary.ranges:
        assert close(comparison.medians[r.key], prev_medians[r.key]), r.key
        assert close(comparison.delta_medians[r.key], r.median - prev_medians[r.key]), r.key


@pytest.mark.parametrize(
    ("tz", "week", "monday_utc"),
    [
        # Winter time: Zurich is UTC+1, so local Monday 00:00 is Sunday 23:00 UTC.
        ("Europe/Zurich", IsoWeek(2026, 47), datetime(2026, 11, 15, 23, 0, tzinfo=UTC)),
        # Chicago is UTC-6 in November: Monday 00:00 local is Monday 06:00 UTC.
        ("America/Chicago", IsoWeek(2026, 47), datetime(2026, 11, 16, 6, 0, tzinfo=UTC)),
    ],
)
def test_a_shot_just_before_and_just_after_local_monday_midnight_fall_in_different_weeks(
    session_factory, tz, week, monday_utc
):
    second = timedelta(seconds=1)
    next_monday_utc = week.bounds_utc(ZoneInfo(tz))[1]
    times = [monday_utc - second, monday_utc, next_monday_utc - second, next_monday_utc]
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "edges", tz)
        insert_shots(session, campaign, times, seed=3)
    with session_factory() as session:
        this_week = build_weekly_summary(session, campaign, week)
        before = build_weekly_summary(session, campaign, week.previous())
    assert [t for t in this_week.shots.taken_at] == [monday_utc, next_monday_utc - second]
    assert before.shot_count == 1 and before.shots.taken_at == [monday_utc - second]
    assert this_week.start_utc == monday_utc
    assert this_week.start_local.hour == 0 and this_week.start_local.weekday() == 0


def test_a_week_with_a_daylight_saving_change_is_one_hour_longer_in_chicago(session_factory):
    # 2026-11-01 (Sunday, ISO 2026-W44) clocks go back in America/Chicago: W44 lasts 169 h.
    week = IsoWeek(2026, 44)
    tz = ZoneInfo("America/Chicago")
    start, end = week.bounds_utc(tz)
    assert end - start == timedelta(hours=169)
    assert start == datetime(2026, 10, 26, 5, 0, tzinfo=UTC)  # CDT, UTC-5
    assert end == datetime(2026, 11, 2, 6, 0, tzinfo=UTC)  # CST, UTC-6
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "dst", "America/Chicago")
        # Sunday 23:59:59 local (after the change) is in W44; Monday 00:00 local is not.
        insert_shots(session, campaign, [end - timedelta(seconds=1), end], seed=4)
    with session_factory() as session:
        assert build_weekly_summary(session, campaign, week).shot_count == 1
        assert build_weekly_summary(session, campaign, IsoWeek(2026, 45)).shot_count == 1


def test_an_empty_week_gives_a_valid_summary_that_says_so(session_factory):
    with session_factory() as session, session.begin():
        campaign = add_campaign(session, "quiet", "Europe/Zurich")
    with session_factory() as session:
        summary = build_weekly_summary(session, campaign, WEEK)
    assert summary.is_empty and summary.shot_count == 0
    assert summary.status_counts == {"nominal": 0, "marginal": 0, "outside": 0}
    assert all(r.count == 0 and r.median is None for r in summary.ranges)
    assert summary.flagged_shots == []
    assert summary.phase_stability.measured_phase_std_rad is None
    assert summary.density_calibration.measured_count == 0
    assert summary.previous.shot_count == 0 and summary.previous.delta_shot_count == 0


def test_shots_of_other_campaigns_and_unevaluated_shots_are_kept_apart(session_factory):
    with session_factory() as session, session.begin():
        mine = add_campaign(session, "mine", "UTC")
        other = add_campaign(session, "other", "UTC")
        start, _ = WEEK.bounds_utc(ZoneInfo("UTC"))
        insert_shots(session, mine, spread_over_week(start, 20), seed=5)
        insert_shots(
            session, mine, spread_over_week(start + timedelta(hours=1), 3), seed=6, prefix="u", evaluated=False
        )
        insert_shots(session, other, spread_over_week(start, 40), seed=7)
    with session_factory() as session:
        summary = build_weekly_summary(session, mine, WEEK)
    assert summary.shot_count == 23
    assert summary.status_counts["not_evaluated"] == 3
    assert sum(summary.status_counts.values()) == 23


@pytest.mark.parametrize(
    "text", ["2026-W54", "2026-47", "W00", "2026-W00", "2025-W53", "26-W47", "2026-W4", "", "2026-W47x"]
)
def test_a_malformed_or_missing_iso_week_is_refused_with_a_clear_message(text):
    with pytest.raises(WeekFormatError, match="week"):
        IsoWeek.parse(text)


def test_iso_weeks_parse_and_step_back_across_the_year():
    assert IsoWeek.parse("2026-W47") == IsoWeek(2026, 47)
    assert IsoWeek.parse("2026W53").label == "2026-W53"  # 2026 has 53 ISO weeks
    assert IsoWeek.parse("2027-W01").previous() == IsoWeek(2026, 53)
    assert IsoWeek(2026, 1).monday().isoformat() == "2025-12-29"


def test_phases_either_side_of_plus_minus_pi_get_a_small_spread_not_one_near_pi(session_factory):
    # Phases within 0.05 rad of +-pi, alternating sides: 0.1 rad apart at most, not 2 pi.
    phases = [(math.pi - 0.05 * ((i // 2) % 5) / 4) * (1 if i % 2 else -1) for i in range(40)]
    with session_factory() as session:
        campaign = add_campaign(session, "wrapping-phase")
        pks = insert_shots(
            session, campaign, spread_over_week(datetime(2026, 11, 16, tzinfo=UTC), 40), measured_fraction=1.0
        )
        for pk, phase in zip(pks, phases, strict=False):
            session.get(Shot, pk).measured_modulation_phase_rad = phase
        session.commit()
        summary = build_weekly_summary(session, campaign, WEEK)
    assert summary.phase_stability.measured_count == 40
    assert summary.phase_stability.measured_phase_std_rad < 0.05
    assert statistics.stdev(phases) > 3  # what a plain std about the plain mean would say


def test_reading_the_week_in_chunks_leaves_later_reads_on_the_same_session_unbuffered(session_factory, zurich_weeks):
    # Regression: the chunked read once set yield_per on the session's connection itself (SQLAlchemy 2
    # changes a Connection's options in place), so a later raw-cursor read there saw no rows and the
    # weekly summary of a one-shot week failed.
    from app.store.exports import iter_shot_rows

    with session_factory() as session:
        parts = list(iter_shot_rows(session, select(Shot.id).order_by(Shot.id), chunk=7))
        assert sum(len(next(iter(part.values()))) for part in parts) > 7
        assert "yield_per" not in session.connection().get_execution_options()
        cursor = session.connection().execute(select(Shot.id).order_by(Shot.id)).cursor
        assert cursor is not None and len(cursor.fetchall()) == len(session.scalars(select(Shot.id)).all())
