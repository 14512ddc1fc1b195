"""The weekly campaign summary: an ISO week in the campaign's timezone, its shots,
counts, ranges, flagged shots, phase-stability and density-calibration figures, and
the change against the previous ISO week.

The week runs from Monday 00:00 local time to the next Monday 00:00 local time
(zoneinfo, so a DST week is 167 or 169 hours long); it is converted to UTC for the
query. Statistics are computed with numpy over the rows of one joined query.
"""

from __future__ import annotations

import gc
import math
import re
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta, timezone
from functools import lru_cache
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
from sqlalchemy.orm import Session

from app.database import snapshot_read
from app.services.phase_spread import phase_jitter
from app.store import summary as summary_store
from app.store.summary import EVALUATION_OUTPUT_COLUMNS, SHOT_INPUT_COLUMNS, FlagRow
from app.tables import Campaign, Shot
from model import OUTPUT_FIELDS

OUTPUT_UNITS = {f.name: f.unit for f in OUTPUT_FIELDS}  # unit of each output name

STATUSES = ("nominal", "marginal", "outside")
NOT_EVALUATED = "not_evaluated"
SEVERITIES = ("outside", "marginal", "info")

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


class WeekFormatError(ValueError):
    """The week is not an ISO week of the form YYYY-Www that exists in that year."""


_WEEK_RE = re.compile(r"^(\d{4})-?W(\d{2})$", re.IGNORECASE)


@dataclass(frozen=True, order=True)
class IsoWeek:
    year: int
    week: int

    @classmethod
    def parse(cls, text: str) -> IsoWeek:
        match = _WEEK_RE.match(text.strip()) if isinstance(text, str) else None
        if not match:
            raise WeekFormatError(
                f"week {text!r} is not an ISO week; write it as YYYY-Www, e.g. 2026-W47"
            )
        year, week = int(match.group(1)), int(match.group(2))
        try:
            date.fromisocalendar(year, week, 1)
        except ValueError:
            last = date(year, 12, 28).isocalendar().week
            raise WeekFormatError(
                f"week {text!r} does not exist: ISO year {year} has weeks W01 to W{last:02d}"
            ) from None
        return cls(year, week)

    @classmethod
    def containing(cls, moment: datetime, tz: ZoneInfo) -> IsoWeek:
        iso = moment.astimezone(tz).date().isocalendar()
        return cls(iso.year, iso.week)

    @property
    def label(self) -> str:
        return f"{self.year}-W{self.week:02d}"

    def __str__(self) -> str:
        return self.label

    def monday(self) -> date:
        return date.fromisocalendar(self.year, self.week, 1)

    def previous(self) -> IsoWeek:
        iso = (self.monday() - timedelta(days=7)).isocalendar()
        return IsoWeek(iso.year, iso.week)

    def bounds_local(self, tz: ZoneInfo) -> tuple[datetime, datetime]:
        """Monday 00:00 local to the next Monday 00:00 local."""
        start = datetime.combine(self.monday(), time(0), tzinfo=tz)
        end = datetime.combine(self.monday() + timedelta(days=7), time(0), tzinfo=tz)
        return start, end

    def bounds_utc(self, tz: ZoneInfo) -> tuple[datetime, datetime]:
        start, end = self.bounds_local(tz)
        return start.astimezone(timezone.utc), end.astimezone(timezone.utc)


def input_column(path: str) -> str:
    """Shot table column of a dotted input path (MODEL.md section 1)."""
    return path.replace(".", "_")


def input_path(column: str) -> str:
    """Dotted input path of a shot table column; the group never has an underscore."""
    return column.replace("_", ".", 1)


INPUT_PATHS: tuple[str, ...] = tuple(input_path(c) for c in SHOT_INPUT_COLUMNS)
OUTPUT_NAMES: tuple[str, ...] = EVALUATION_OUTPUT_COLUMNS
_TEXT_INPUTS = {
    input_path(c.name)
    for c in Shot.__table__.columns
    if c.name in SHOT_INPUT_COLUMNS and c.type.python_type is str
}


def is_text_input(path: str) -> bool:
    return path in _TEXT_INPUTS


@dataclass
class WeekShots:
    """The week's shots column-wise, in taken_at order. Numeric inputs and outputs are
    float arrays (NaN for null); text inputs are object arrays."""

    shot_pk: np.ndarray
    shot_id: list[str]
    taken_at: list[datetime]
    revision: list[int]
    notes: list[str]
    tags: list[list[str]]
    model_version: list[str | None]
    settings_version: list[int | None]
    status: np.ndarray
    inputs: dict[str, np.ndarray]
    outputs: dict[str, np.ndarray]
    flags: list[list[FlagRow]]

    def __len__(self) -> int:
        return len(self.shot_pk)

    @classmethod
    def from_columns(cls, columns: Mapping[str, list[Any]], flags: Iterable[FlagRow] = ()) -> WeekShots:
        """From fetch_week_rows' columns; columns it did not fetch come out empty."""
        n = len(columns["shot_pk"])
        inputs: dict[str, np.ndarray] = {}
        for col in SHOT_INPUT_COLUMNS:
            if col not in columns:
                continue
            path = input_path(col)
            dtype = object if is_text_input(path) else float
            inputs[path] = np.array(columns[col], dtype=dtype).reshape(n)
        outputs = {
            name: np.array(columns[name], dtype=float).reshape(n)
            for name in EVALUATION_OUTPUT_COLUMNS
            if name in columns
        }
        status = np.array(
            [s if s is not None else NOT_EVALUATED for s in columns["status"]], dtype=object
        ).reshape(n)
        shot_pk = np.array(columns["shot_pk"], dtype=np.int64).reshape(n)
        per_shot: list[list[FlagRow]] = [[] for _ in range(n)]
        index = {pk: i for i, pk in enumerate(columns["shot_pk"])}
        for flag in flags:
            i = index.get(flag.shot_pk)
            if i is not None:
                per_shot[i].append(flag)
        return cls(
            shot_pk=shot_pk,
            shot_id=list(columns.get("shot_id", ())),
            taken_at=list(columns.get("taken_at", ())),
            revision=list(columns.get("revision", ())),
            notes=[text or "" for text in columns.get("notes", ())],
            tags=[list(t or []) for t in columns.get("tags", ())],
            model_version=list(columns.get("model_version", ())),
            settings_version=list(columns.get("settings_version", ())),
            status=status,
            inputs=inputs,
            outputs=outputs,
            flags=per_shot,
        )

    def values(self, key: str) -> np.ndarray:
        """A numeric input (dotted path) or output (name) as a float array."""
        if key in self.outputs:
            return self.outputs[key]
        return self.inputs[key]


@lru_cache(maxsize=1)
def _input_units() -> dict[str, str]:
    from model import INPUT_FIELDS

    return {f.path: f.unit for f in INPUT_FIELDS}


def unit_of(key: str) -> str:
    """Unit of an input path (MODEL.md section 1) or an output name (section 8)."""
    if key in OUTPUT_UNITS:
        return OUTPUT_UNITS[key]
    return _input_units().get(key, "")


@dataclass(frozen=True)
class QuantityRange:
    key: str
    unit: str
    count: int
    min: float | None
    median: float | None
    max: float | None


@dataclass(frozen=True)
class FlaggedShot:
    shot_id: str
    taken_at: datetime
    status: str
    reasons: list[FlagRow]


@dataclass(frozen=True)
class PhaseStability:
    """The week's shot-to-shot phase stability (app.services.phase_spread): deviations from
    a running circular mean / running median of NEIGHBOUR_WINDOW_SHOTS neighbouring shots."""

    measured_count: int
    measured_phase_std_rad: float | None  # shot-to-shot phase jitter
    density_count: int
    density_spread_pct: float | None  # shot-to-shot density jitter, % of the running median
    phase_per_pct_density_rad: float | None  # median over the week's shots
    expected_phase_jitter_rad: float | None  # phase_per_pct_density_rad x density_spread_pct
    measured_over_expected: float | None


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
    flagged_shots: list[FlaggedShot]
    phase_stability: PhaseStability
    density_calibration: DensityCalibration
    previous: WeekComparison
    model_versions: list[str]
    shots: WeekShots = field(repr=False)

    @property
    def is_empty(self) -> bool:
        return self.shot_count == 0


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while a week's rows are built: the objects are
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


def _num(x: float | np.floating | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


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


def phase_stability(shots: WeekShots) -> PhaseStability:
    jitter = phase_jitter(
        shots.inputs["measured.modulation_phase_rad"],
        shots.inputs["plasma.density_cm3"],
        shots.outputs["phase_per_pct_density_rad"],
    )
    measured, expected = jitter.measured_phase_std_rad, jitter.expected_phase_jitter_rad
    ratio = measured / expected if measured is not None and expected else None
    return PhaseStability(
        measured_count=jitter.phase_count,
        measured_phase_std_rad=measured,
        density_count=jitter.density_count,
        density_spread_pct=jitter.density_spread_pct,
        phase_per_pct_density_rad=jitter.phase_per_pct_density_rad,
        expected_phase_jitter_rad=expected,
        measured_over_expected=_num(ratio),
    )


def density_calibration(shots: WeekShots) -> DensityCalibration:
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


def _known_flag_codes() -> list[str]:
    from model import FLAG_CODES

    return list(FLAG_CODES)


def flag_counts(codes_severities_shots: Iterable[tuple[str, str, int]]) -> dict[str, dict[str, int]]:
    """{code: {severity: shots}} with every model flag code present (zeros included)."""
    counts: dict[str, dict[str, int]] = {code: {s: 0 for s in SEVERITIES} for code in _known_flag_codes()}
    for code, severity, n in codes_severities_shots:
        counts.setdefault(code, {s: 0 for s in SEVERITIES})
        counts[code][severity] = counts[code].get(severity, 0) + n
    return counts


def _flag_counts_of(shots: WeekShots) -> dict[str, dict[str, int]]:
    tally: dict[tuple[str, str], int] = {}
    for per_shot in shots.flags:
        for f in {(f.code, f.severity) for f in per_shot}:
            tally[f] = tally.get(f, 0) + 1
    return flag_counts((code, sev, n) for (code, sev), n in tally.items())


def flagged_shots(shots: WeekShots) -> list[FlaggedShot]:
    """Outside shots first, then marginal ones, each in taken_at order, with the flags
    that are reasons for the status (info flags never are)."""
    result: list[FlaggedShot] = []
    for wanted in ("outside", "marginal"):
        for i in np.flatnonzero(shots.status == wanted).tolist():
            reasons = [f for f in shots.flags[i] if f.severity in ("outside", "marginal")]
            result.append(FlaggedShot(shots.shot_id[i], shots.taken_at[i], wanted, reasons))
    return result


def _shot_count_per_code(counts: Mapping[str, Mapping[str, int]]) -> dict[str, int]:
    return {code: sum(by_sev.values()) for code, by_sev in counts.items()}


def _delta(a: float | None, b: float | None) -> float | None:
    return a - b if a is not None and b is not None else None


# --- building --------------------------------------------------------------------


def load_week_shots(session: Session, campaign: Campaign, week: IsoWeek) -> WeekShots:
    start, end = week.bounds_utc(ZoneInfo(campaign.timezone))
    columns = summary_store.fetch_week_rows(session, campaign.id, start, end)
    flags = summary_store.fetch_week_flags(session, campaign.id, start, end)
    return WeekShots.from_columns(columns, flags)


@dataclass
class _WeekFigures:
    shot_count: int
    status_counts: dict[str, int]
    flag_counts: dict[str, dict[str, int]]
    ranges: list[QuantityRange]


def _previous_week(
    session: Session, campaign: Campaign, week: IsoWeek, current: _WeekFigures
) -> WeekComparison:
    tz = ZoneInfo(campaign.timezone)
    prev = week.previous()
    start, end = prev.bounds_utc(tz)
    keys = KEY_CONDITIONS + KEY_OUTPUTS
    columns = summary_store.fetch_week_rows(
        session,
        campaign.id,
        start,
        end,
        input_columns=[input_column(k) for k in KEY_CONDITIONS],
        output_columns=list(KEY_OUTPUTS),
        details=False,
    )
    shots = WeekShots.from_columns(columns)
    counts = status_counts(shots.status)
    flags = _shot_count_per_code(flag_counts(summary_store.count_week_flags(session, campaign.id, start, end)))
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
        delta_status_counts={
            s: current.status_counts.get(s, 0) - counts.get(s, 0) for s in status_keys
        },
        delta_flag_shot_counts={
            c: cur_flags.get(c, 0) - flags.get(c, 0) for c in dict.fromkeys([*cur_flags, *flags])
        },
        delta_medians={r.key: _delta(r.median, medians.get(r.key)) for r in current.ranges},
    )


def build_weekly_summary(
    session: Session, campaign: Campaign, week: IsoWeek, *, now: datetime | None = None
) -> WeeklySummary:
    """The summary of one ISO week of a campaign, in the campaign's timezone."""
    # One snapshot for every read: a re-evaluation committed meanwhile cannot pair old
    # statuses with new flags, nor this week with a different previous week.
    with snapshot_read(session) as read:
        return _build_weekly_summary(read, campaign, week, now)


def _build_weekly_summary(session: Session, campaign: Campaign, week: IsoWeek, now: datetime | None) -> WeeklySummary:
    tz = ZoneInfo(campaign.timezone)
    with collector_paused():
        shots = load_week_shots(session, campaign, week)
    figures = _WeekFigures(
        shot_count=len(shots),
        status_counts=status_counts(shots.status),
        flag_counts=_flag_counts_of(shots),
        ranges=[quantity_range(k, shots.values(k)) for k in KEY_CONDITIONS + KEY_OUTPUTS],
    )
    start_local, end_local = week.bounds_local(tz)
    return WeeklySummary(
        campaign_slug=campaign.slug,
        campaign_name=campaign.name,
        timezone=campaign.timezone,
        week=week,
        start_local=start_local,
        end_local=end_local,
        start_utc=start_local.astimezone(timezone.utc),
        end_utc=end_local.astimezone(timezone.utc),
        generated_at=(now or datetime.now(timezone.utc)).astimezone(timezone.utc),
        shot_count=figures.shot_count,
        status_counts=figures.status_counts,
        flag_counts=figures.flag_counts,
        ranges=figures.ranges,
        flagged_shots=flagged_shots(shots),
        phase_stability=phase_stability(shots),
        density_calibration=density_calibration(shots),
        previous=_previous_week(session, campaign, week, figures),
        model_versions=sorted({v for v in shots.model_version if v}),
        shots=shots,
    )
