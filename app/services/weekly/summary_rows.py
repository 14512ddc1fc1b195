"""The weekly summary's figures as rows, one quantity each: the summary CSV (the shot CSV has
one row per shot and no room for them).

Columns: ``section``, ``quantity``, ``value``, ``low``, ``high``, ``unit``, ``shots``,
``previous_week``, ``change``, ``note``. ``value`` is the figure (a median, an estimate, a count,
or a text for the week's own rows); ``low`` and ``high`` its interval (the 95 % interval of an
estimate; min and max for a range, as ``note`` says); ``shots`` how many shots it rests on;
``previous_week`` and ``change`` the same figure a week earlier and the difference, where the
summary compares them. Sections, in order: ``week``, ``counts``, ``flags``, ``ranges``,
``phase_stability``, ``density_calibration``, ``model_check`` (the week's density scale with its
interval, each change found with the scale before and after, each scaling exponent). The same
numbers as the JSON summary (``app.services.weekly.table.summary_document``) under the same keys;
the marginal and outside shots themselves are the shot CSV's rows (``status``, ``flag_codes``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from app.advisory import ADVISORY_CAUTION
from app.plain import plain
from app.presentation.csv_writer import CsvColumn, joined
from app.services.phase_spread import JITTER_SOURCES, NEIGHBOUR_WINDOW_SHOTS
from app.services.weekly.summary import SEVERITIES, WeeklySummary
from app.times import iso_text

SUMMARY_COLUMNS = ("section", "quantity", "value", "low", "high", "unit", "shots", "previous_week", "change", "note")


@dataclass(frozen=True)
class SummaryRow:
    section: str
    quantity: str
    value: Any = None
    low: float | None = None
    high: float | None = None
    unit: str = ""
    shots: int | None = None
    previous_week: Any = None
    change: Any = None
    note: str = ""


def _week_rows(s: WeeklySummary) -> list[SummaryRow]:
    rows = [
        ("campaign", s.campaign_slug, s.campaign_name),
        ("week", s.week.label, f"ISO week in {s.timezone}"),
        ("timezone", s.timezone, ""),
        ("start_local", iso_text(s.start_local), ""),
        ("end_local", iso_text(s.end_local), ""),
        ("start_utc", iso_text(s.start_utc), ""),
        ("end_utc", iso_text(s.end_utc), ""),
        ("generated_at", iso_text(s.generated_at), ""),
        ("model_versions", joined(s.model_versions), ""),
        ("caution", "", ADVISORY_CAUTION),
    ]
    return [SummaryRow("week", quantity, value, note=note) for quantity, value, note in rows]


def _count_rows(s: WeeklySummary) -> list[SummaryRow]:
    prev = s.previous
    rows = [
        SummaryRow("counts", "shots", s.shot_count, previous_week=prev.shot_count, change=prev.delta_shot_count),
        SummaryRow("counts", "excluded_shots", s.excluded_count, note="test or junk shots, counted nowhere"),
    ]
    rows += [
        SummaryRow(
            "counts",
            f"status.{status}",
            n,
            previous_week=prev.status_counts.get(status, 0),
            change=prev.delta_status_counts.get(status),
        )
        for status, n in s.status_counts.items()
    ]
    return rows


def _flag_rows(s: WeeklySummary) -> list[SummaryRow]:
    prev = s.previous
    rows = []
    for code, by_severity in s.flag_counts.items():
        rows.append(
            SummaryRow(
                "flags",
                code,
                sum(by_severity.values()),
                previous_week=prev.flag_shot_counts.get(code, 0),
                change=prev.delta_flag_shot_counts.get(code),
                note="shots with the flag, any severity",
            )
        )
        rows += [SummaryRow("flags", f"{code}:{severity}", by_severity.get(severity, 0)) for severity in SEVERITIES]
    return rows


def _range_rows(s: WeeklySummary) -> list[SummaryRow]:
    prev = s.previous
    return [
        SummaryRow(
            "ranges",
            r.key,
            r.median,
            r.min,
            r.max,
            r.unit,
            r.count,
            prev.medians.get(r.key),
            prev.delta_medians.get(r.key),
            "median; low and high are the min and max",
        )
        for r in s.ranges
    ]


def _phase_rows(s: WeeklySummary) -> list[SummaryRow]:
    p = s.phase_stability
    neighbours = f"shot to shot, against the {NEIGHBOUR_WINDOW_SHOTS - 1} neighbouring shots"
    rows = [
        SummaryRow("phase_stability", "measured_phase_std_rad", p.measured_phase_std_rad, unit="rad",
                   shots=p.measured_count, note=neighbours),
        SummaryRow("phase_stability", "expected_phase_jitter_rad", p.expected_phase_jitter_rad, unit="rad",
                   note="root-sum-square of the parts by source"),
        SummaryRow("phase_stability", "measured_over_expected", p.measured_over_expected),
        SummaryRow("phase_stability", "density_spread_pct", p.density_spread_pct, unit="%", shots=p.density_count,
                   note=neighbours),
        SummaryRow("phase_stability", "phase_per_pct_density_rad", p.phase_per_pct_density_rad, unit="rad"),
    ]  # fmt: skip
    for source in JITTER_SOURCES:
        rows += [
            SummaryRow("phase_stability", f"spread_pct.{source}", p.spread_pct.get(source), unit="%", note=neighbours),
            SummaryRow("phase_stability", f"phase_per_ln_rad.{source}", p.phase_per_ln_rad.get(source), unit="rad"),
            SummaryRow("phase_stability", f"expected_by_source_rad.{source}", p.expected_by_source_rad.get(source),
                       unit="rad"),
        ]  # fmt: skip
    return rows


def _density_rows(s: WeeklySummary) -> list[SummaryRow]:
    d = s.density_calibration
    figures = [
        ("median_implied_offset_pct", d.median_implied_offset_pct, "%"),
        ("median_implied_offset_cm3", d.median_implied_offset_cm3, "cm^-3"),
        ("frequency_mismatch_mean_pct", d.frequency_mismatch_mean_pct, "%"),
        ("frequency_mismatch_std_pct", d.frequency_mismatch_std_pct, "%"),
    ]
    return [SummaryRow("density_calibration", q, v, unit=u, shots=d.measured_count) for q, v, u in figures]


def _interval(section: str, quantity: str, figure: Mapping[str, Any], shots: Any, **more: Any) -> SummaryRow:
    return SummaryRow(section, quantity, figure.get("estimate"), figure.get("low"), figure.get("high"), shots=shots,
                      **more)  # fmt: skip


def _model_check_rows(s: WeeklySummary) -> list[SummaryRow]:
    check = s.model_check
    if not check:
        return []
    scale = check["density_scale"]
    rows = [
        _interval("model_check", "density_scale", scale, scale.get("shots"),
                  note=f"95 % interval ({scale.get('interval_method')})"),
        SummaryRow("model_check", "applied_density_scale", check.get("applied_density_scale"),
                   note="the campaign's density_scale setting"),
        _interval("model_check", "frequency_mismatch_pct", check["frequency_mismatch_pct"],
                  check["frequency_mismatch_pct"].get("shots"), unit="%"),
    ]  # fmt: skip
    for number, change in enumerate(check["changes"], start=1):
        at = f"change.{number}"
        errors = change.get("standard_errors")
        rows += [
            SummaryRow("model_check", f"{at}.shot_id", change["shot_id"], note="first shot after the change"),
            SummaryRow("model_check", f"{at}.taken_at", change["taken_at"]),
            _interval("model_check", f"{at}.density_scale_before", change["before"], change.get("shots_before")),
            _interval("model_check", f"{at}.density_scale_after", change["after"], change.get("shots_after")),
            SummaryRow("model_check", f"{at}.standard_errors", errors, note="size of the step"),
        ]
    for check_row in check["scaling"]:
        at = f"scaling.{check_row['diagnostic']}"
        rows += [
            SummaryRow("model_check", f"{at}.exponent", check_row.get("exponent"), check_row.get("exponent_low"),
                       check_row.get("exponent_high"), shots=check_row.get("shots"),
                       note=f"against {check_row.get('proxy')}; 95 % interval"),
            SummaryRow("model_check", f"{at}.expected_exponent", check_row.get("expected_exponent")),
            SummaryRow("model_check", f"{at}.spearman", check_row.get("spearman")),
            SummaryRow("model_check", f"{at}.outliers", check_row.get("outliers"), note="shots left out of the fit"),
        ]  # fmt: skip
    return rows


def summary_rows(summary: WeeklySummary) -> list[SummaryRow]:
    """Every figure of the week, one row each, in the order of the module docstring."""
    return [
        *_week_rows(summary),
        *_count_rows(summary),
        *_flag_rows(summary),
        *_range_rows(summary),
        *_phase_rows(summary),
        *_density_rows(summary),
        *_model_check_rows(summary),
    ]


def summary_csv_columns(summary: WeeklySummary) -> list[CsvColumn]:
    """The rows as CSV columns (the one CSV convention: numbers unrounded, empty for none, text defused)."""
    rows = summary_rows(summary)
    numbers = {"low", "high", "shots"}
    # plain: NaN and infinity become empty cells, numpy numbers plain ones.
    return [
        CsvColumn(name, plain([getattr(r, name) for r in rows]), text=name not in numbers) for name in SUMMARY_COLUMNS
    ]
