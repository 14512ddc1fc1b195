"""The weekly campaign summary: an ISO week in the campaign's time zone, its shots,
counts, ranges, flagged shots, phase-stability and density-calibration figures, and
the change against the previous ISO week.

The week runs from Monday 00:00 local time to the next Monday 00:00 local time
(``app.times.IsoWeek``), converted to UTC for the query. Statistics are computed with
numpy over the rows of one joined read (``app.store.exports``), on one snapshot.
Excluded shots are left out of every figure (``app.store.exclusions``); the summary only
says how many of the week's shots were excluded.
"""

from __future__ import annotations

import gc
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from functools import cached_property
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

import model
from app.database import read_meanwhile, snapshot_read
from app.plain import finite_or_none, float_list
from app.presentation.fields import unit_of
from app.services.calibration import week_figures
from app.services.export_table import NOT_EVALUATED, ShotTable
from app.services.phase_spread import JITTER_SOURCES, phase_jitter, typical_phase_derivatives
from app.store import exports as export_store
from app.store.exports import FlagRow
from app.tables import Campaign
from app.times import IsoWeek, campaign_zone

STATUSES = model.STATUSES
SEVERITIES = model.SEVERITIES


def export_file_name(campaign_slug: str, week_label: str, fmt: str, table: str = "shots") -> str:
    """``wakeledger-SLUG-2026-W47.csv``: the file name of a week's export in any format;
    ``wakeledger-SLUG-2026-W47-summary.csv`` for the summary table."""
    part = "" if table == "shots" else f"-{table}"
    return f"wakeledger-{campaign_slug}-{week_label}{part}.{fmt}"


# Key conditions and outputs whose min / median / max the summary reports; the
# medians are compared with the previous week.
KEY_CONDITIONS = (
    "plasma.density_cm3",
    "plasma.gradient_pct_per_m",
    "driver.population",
    "driver.sigma_z_mm",
    "driver.sigma_r_mm",
    "driver.emittance_n_mm_mrad",
    "seed.position_mm",
    "driver.offset_x_mm",
    "driver.offset_y_mm",
    "driver.angle_x_mrad",
    "driver.angle_y_mrad",
)
KEY_OUTPUTS = (
    "efolds_exit",
    "growth_margin_efolds",
    "seed_to_noise_efolds",
    "wakefield_estimate_mv_m",
    "phase_slip_rad",
    "gradient_phase_error_rad",
    "hosing_ratio",
    "ion_motion_index",
    "divergence_ratio",
    "density_ratio",
    "kp_sigma_r",
    "bunch_length_over_plasma_wavelength",
    "frequency_mismatch_pct",
)


@dataclass(frozen=True)
class QuantityRange:
    key: str
    unit: str
    count: int
    min: float | None
    median: float | None
    max: float | None


@dataclass(slots=True)  # not frozen: thousands are made per week, and frozen ones cost twice as much
class FlaggedShot:
    shot_id: str
    taken_at: datetime
    status: str
    reasons: list[FlagRow]


@dataclass(frozen=True)
class PhaseStability:
    """The week's shot-to-shot phase stability (app.services.phase_spread), over the evaluated shots
    with a measured phase in time order, as the overview selects them: deviations from the circular
    mean / median of each shot's NEIGHBOUR_WINDOW_SHOTS - 1 neighbours."""

    measured_count: int
    measured_phase_std_rad: float | None  # shot-to-shot phase jitter
    density_count: int
    density_spread_pct: float | None  # shot-to-shot density jitter [%]
    phase_per_pct_density_rad: float | None  # |d psi/d ln n| / 100, median over a sample of the shots
    expected_phase_jitter_rad: float | None  # root-sum-square of expected_by_source_rad
    measured_over_expected: float | None
    spread_pct: dict[str, float | None] = field(default_factory=dict)  # jitter source -> shot-to-shot [%]
    phase_per_ln_rad: dict[str, float | None] = field(default_factory=dict)  # source -> d psi/d ln x [rad]
    expected_by_source_rad: dict[str, float | None] = field(default_factory=dict)  # source -> its part [rad]


@dataclass(frozen=True)
class DensityCalibration:
    measured_count: int
    median_implied_offset_pct: float | None
    median_implied_offset_cm3: float | None
    frequency_mismatch_mean_pct: float | None
    frequency_mismatch_std_pct: float | None


@dataclass(frozen=True)
class WeekComparison:
    week: IsoWeek
    shot_count: int
    status_counts: dict[str, int]
    flag_shot_counts: dict[str, int]
    medians: dict[str, float | None]
    delta_shot_count: int
    delta_status_counts: dict[str, int]
    delta_flag_shot_counts: dict[str, int]
    delta_medians: dict[str, float | None]


@dataclass
class WeeklySummary:
    campaign_slug: str
    campaign_name: str
    timezone: str
    week: IsoWeek
    start_local: datetime
    end_local: datetime
    start_utc: datetime
    end_utc: datetime
    generated_at: datetime
    shot_count: int
    status_counts: dict[str, int]
    flag_counts: dict[str, dict[str, int]]
    ranges: list[QuantityRange]
    phase_stability: PhaseStability
    density_calibration: DensityCalibration
    previous: WeekComparison
    model_versions: list[str]
    shots: ShotTable = field(repr=False)
    # The week's model against measurement (app.services.calibration.week_figures): density
    # scale with its interval, changes, scaling exponents.
    model_check: dict[str, Any] = field(default_factory=dict)
    excluded_count: int = 0  # the week's excluded shots, in no figure

    @property
    def is_empty(self) -> bool:
        return self.shot_count == 0

    @cached_property
    def flagged_shots(self) -> list[FlaggedShot]:
        """The outside, then the marginal shots with their reasons (made when a file lists them:
        the JSON and HTML do, the Parquet and the CSV files do not)."""
        with collector_paused():
            return flagged_shots(self.shots)


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while a week is read and written: the objects are
    acyclic and short-lived, and repeated full collections over them cost a third of
    the time. Reference counting still frees everything."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


# --- statistics -----------------------------------------------------------------


def _finite(values: np.ndarray) -> np.ndarray:
    return values[np.isfinite(values)]


def _median(values: np.ndarray) -> float | None:
    v = _finite(values)
    return float(np.median(v)) if v.size else None


def _std(values: np.ndarray) -> float | None:
    """Sample standard deviation (n - 1), None below two values."""
    v = _finite(values)
    return float(np.std(v, ddof=1)) if v.size >= 2 else None


def quantity_range(key: str, values: np.ndarray) -> QuantityRange:
    v = _finite(values)
    if not v.size:
        return QuantityRange(key, unit_of(key), 0, None, None, None)
    return QuantityRange(key, unit_of(key), int(v.size), float(v.min()), float(np.median(v)), float(v.max()))


def phase_stability(shots: ShotTable, settings: Mapping[str, Any] | None = None) -> PhaseStability:
    phase = shots.inputs["measured.modulation_phase_rad"]
    chosen = np.isfinite(phase) & (shots.status != NOT_EVALUATED)  # the overview's selection
    inputs = {path: column[chosen] for path, column in shots.inputs.items()}
    derivatives = typical_phase_derivatives(inputs, settings) if chosen.any() else dict.fromkeys(JITTER_SOURCES)
    jitter = phase_jitter(inputs["measured.modulation_phase_rad"], {p: inputs[p] for p in JITTER_SOURCES}, derivatives)
    measured, expected = jitter.measured_phase_std_rad, jitter.expected_phase_jitter_rad
    ratio = measured / expected if measured is not None and expected else None
    return PhaseStability(
        measured_count=jitter.phase_count,
        measured_phase_std_rad=measured,
        density_count=jitter.density_count,
        density_spread_pct=jitter.density_spread_pct,
        phase_per_pct_density_rad=jitter.phase_per_pct_density_rad,
        expected_phase_jitter_rad=expected,
        measured_over_expected=finite_or_none(ratio),
        spread_pct=jitter.spread_pct,
        phase_per_ln_rad=jitter.phase_per_ln_rad,
        expected_by_source_rad=jitter.expected_by_source_rad,
    )


def density_calibration(shots: ShotTable) -> DensityCalibration:
    implied = shots.outputs["implied_density_cm3"]
    n0 = shots.inputs["plasma.density_cm3"]
    ok = np.isfinite(implied) & np.isfinite(n0) & (n0 > 0)
    mismatch = _finite(shots.outputs["frequency_mismatch_pct"])
    return DensityCalibration(
        measured_count=int(ok.sum()),
        median_implied_offset_pct=_median(100.0 * (implied[ok] / n0[ok] - 1.0)),
        median_implied_offset_cm3=_median(implied[ok] - n0[ok]),
        frequency_mismatch_mean_pct=float(np.mean(mismatch)) if mismatch.size else None,
        frequency_mismatch_std_pct=_std(mismatch),
    )


def status_counts(status: np.ndarray) -> dict[str, int]:
    counts = {s: int(np.count_nonzero(status == s)) for s in STATUSES}
    missing = int(np.count_nonzero(status == NOT_EVALUATED))
    if missing:
        counts[NOT_EVALUATED] = missing
    return counts


def flag_counts(codes_severities_shots: Iterable[tuple[str, str, int]]) -> dict[str, dict[str, int]]:
    """{code: {severity: shots}} with every model flag code present (zeros included)."""
    counts: dict[str, dict[str, int]] = {code: {s: 0 for s in SEVERITIES} for code in model.FLAG_CODES}
    for code, severity, n in codes_severities_shots:
        counts.setdefault(code, {s: 0 for s in SEVERITIES})
        counts[code][severity] = counts[code].get(severity, 0) + n
    return counts


def _flag_counts_of(shots: ShotTable) -> dict[str, dict[str, int]]:
    flags = shots.flags.columns
    kinds: dict[tuple[str, str], int] = {}
    kind = np.array(
        [kinds.setdefault(k, len(kinds)) for k in zip(flags.code, flags.severity, strict=True)], dtype=np.int64
    )
    # Shots per (code, severity): a shot with the same flag twice counts once.
    per_shot = np.unique(shots.flags.row_of_flag() * max(len(kinds), 1) + kind) % max(len(kinds), 1)
    tally = np.bincount(per_shot, minlength=len(kinds)).tolist()
    return flag_counts((code, sev, tally[i]) for (code, sev), i in kinds.items())


REASON_SEVERITIES = ("outside", "marginal")


def flagged_rows(shots: ShotTable) -> list[tuple[int, str]]:
    """(row, status) of the outside shots, then of the marginal ones, each in taken_at order."""
    return [(i, wanted) for wanted in REASON_SEVERITIES for i in np.flatnonzero(shots.status == wanted).tolist()]


def flagged_shots(shots: ShotTable) -> list[FlaggedShot]:
    """The shots of ``flagged_rows`` with the flags that are reasons for their status (info flags
    never are)."""
    flags = shots.flags.columns
    reason = np.flatnonzero([severity in REASON_SEVERITIES for severity in flags.severity])
    picks = reason.tolist()
    reasons = list(
        map(
            FlagRow,
            flags.shot_pk[reason].tolist(),
            [flags.code[j] for j in picks],
            [flags.severity[j] for j in picks],
            float_list(flags.value[reason]),
            float_list(flags.limit[reason]),
            [flags.message[j] for j in picks],
        )
    )
    bounds = np.searchsorted(shots.flags.row_of_flag()[reason], np.arange(len(shots) + 1)).tolist()
    return [
        FlaggedShot(shots.shot_id[i], shots.taken_at[i], status, reasons[bounds[i] : bounds[i + 1]])
        for i, status in flagged_rows(shots)
    ]


def _shot_count_per_code(counts: Mapping[str, Mapping[str, int]]) -> dict[str, int]:
    return {code: sum(by_sev.values()) for code, by_sev in counts.items()}


def _delta(a: float | None, b: float | None) -> float | None:
    return a - b if a is not None and b is not None else None


# --- building --------------------------------------------------------------------


def _week_window(campaign: Campaign, week: IsoWeek, excluded: str = "omit") -> list[Any]:
    start, end = week.bounds_utc(campaign_zone(campaign.timezone))
    return export_store.in_window(campaign.id, start, end, excluded)


def load_week_shots(session: Session, campaign: Campaign, week: IsoWeek) -> ShotTable:
    """Every counted shot of the week with its evaluation, flags and other sections, in taken_at order."""
    window = _week_window(campaign, week)
    chunks = export_store.iter_shot_rows(session, export_store.shot_rows_query(window, payloads=True))
    return ShotTable.from_chunks(chunks, export_store.fetch_flags(session, window))


def week_shots(session: Session, campaign: Campaign, week: IsoWeek) -> ShotTable:
    """The week's shots alone (what the shot CSV writes), read on one snapshot."""
    with snapshot_read(session) as read, collector_paused():
        return load_week_shots(read, campaign, week)


@dataclass
class _WeekFigures:
    shot_count: int
    status_counts: dict[str, int]
    flag_counts: dict[str, dict[str, int]]
    ranges: list[QuantityRange]


def _read_previous_week(session: Session, window: list[Any]) -> ShotTable:
    """The previous week's shots: the key conditions and outputs only."""
    stmt = export_store.shot_rows_query(
        window,
        input_columns=[model.column_name(k) for k in KEY_CONDITIONS],
        output_columns=list(KEY_OUTPUTS),
        details=False,
    )
    return ShotTable.from_chunks(export_store.iter_shot_rows(session, stmt))


def _previous_week(
    prev: IsoWeek, shots: ShotTable, codes_severities_shots: list[tuple[str, str, int]], current: _WeekFigures
) -> WeekComparison:
    keys = KEY_CONDITIONS + KEY_OUTPUTS
    counts = status_counts(shots.status)
    flags = _shot_count_per_code(flag_counts(codes_severities_shots))
    medians = {k: _median(shots.values(k)) for k in keys}
    cur_flags = _shot_count_per_code(current.flag_counts)
    status_keys = list(dict.fromkeys([*current.status_counts, *counts]))
    return WeekComparison(
        week=prev,
        shot_count=len(shots),
        status_counts=counts,
        flag_shot_counts=flags,
        medians=medians,
        delta_shot_count=current.shot_count - len(shots),
        delta_status_counts={s: current.status_counts.get(s, 0) - counts.get(s, 0) for s in status_keys},
        delta_flag_shot_counts={c: cur_flags.get(c, 0) - flags.get(c, 0) for c in dict.fromkeys([*cur_flags, *flags])},
        delta_medians={r.key: _delta(r.median, medians.get(r.key)) for r in current.ranges},
    )


def build_weekly_summary(
    session: Session, campaign: Campaign, week: IsoWeek, *, now: datetime | None = None
) -> WeeklySummary:
    """The summary of one ISO week of a campaign, in the campaign's timezone."""
    # One snapshot for every read: a re-evaluation committed meanwhile cannot pair old
    # statuses with new flags, nor this week with a different previous week.
    with snapshot_read(session) as read, collector_paused():
        return _build_weekly_summary(read, campaign, week, now)


def _build_weekly_summary(session: Session, campaign: Campaign, week: IsoWeek, now: datetime | None) -> WeeklySummary:
    zone = campaign_zone(campaign.timezone)
    prev_window = _week_window(campaign, week.previous())
    # The previous week's flags are counted meanwhile (PostgreSQL: on a second connection of the same
    # snapshot; the server's longest query of a summary, with a result of a few rows, while this
    # process reads and computes the week).
    with read_meanwhile(session, lambda read: export_store.count_flags(read, prev_window)) as previous_flags:
        shots = load_week_shots(session, campaign, week)
        figures = _WeekFigures(
            shot_count=len(shots),
            status_counts=status_counts(shots.status),
            flag_counts=_flag_counts_of(shots),
            ranges=[quantity_range(k, shots.values(k)) for k in KEY_CONDITIONS + KEY_OUTPUTS],
        )
        start_local, end_local = week.bounds_local(zone)
        # From the week's table: its shots are not read again.
        model_check = week_figures(
            session, campaign.slug, start_local.astimezone(UTC), end_local.astimezone(UTC), week=shots
        )
        excluded_count = export_store.count_shots(session, _week_window(campaign, week, "only"))
        comparison = _previous_week(
            week.previous(), _read_previous_week(session, prev_window), previous_flags(), figures
        )
    return WeeklySummary(
        campaign_slug=campaign.slug,
        campaign_name=campaign.name,
        timezone=zone.key,  # the zone the week was computed in (UTC if the campaign's is unknown)
        week=week,
        start_local=start_local,
        end_local=end_local,
        start_utc=start_local.astimezone(UTC),
        end_utc=end_local.astimezone(UTC),
        generated_at=(now or datetime.now(UTC)).astimezone(UTC),
        shot_count=figures.shot_count,
        status_counts=figures.status_counts,
        flag_counts=figures.flag_counts,
        ranges=figures.ranges,
        phase_stability=phase_stability(shots, campaign.model_settings or {}),
        density_calibration=density_calibration(shots),
        previous=comparison,
        model_versions=sorted({v for v in shots.model_version if v}),
        shots=shots,
        model_check=model_check,
        excluded_count=excluded_count,
    )
