"""The model against measurement (MODEL.md, "Model against measurement"): the density scale
with its interval, its changes along a campaign, the scaling checks of the measured
diagnostics and the ranking of what drives them.

Pure numpy/scipy on aligned per-shot arrays in time order (NaN where a value is absent).
The statistics are scipy's: ``scipy.stats.bootstrap`` (percentile intervals, a fixed seed so
an answer is reproducible), the order-statistic interval of a median of ``quantile_test``
(for large samples and for every point of a series; its binomial indices taken from
``scipy.stats.binom`` directly), ``theilslopes``, ``spearmanr``, ``rankdata`` and ``kstwobign``. The proxies of
the scaling checks are project proxies, not published laws.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from model.evaluate import evaluate_table

#: Confidence of every interval.
CONFIDENCE = 0.95
#: Seed of every bootstrap: the same shots give the same interval.
BOOTSTRAP_SEED = 14_2026
#: Resamples of the median's bootstrap.
MEDIAN_RESAMPLES = 999
#: Up to this many values the median's interval is the bootstrap's; above it the order-statistic
#: interval (``scipy.stats.quantile_test``), to which the bootstrap percentile interval of a
#: median converges, at a cost that does not grow with resamples x shots.
BOOTSTRAP_MAX_VALUES = 1000
#: Normalised MAD: 1 / Phi^-1(3/4) (the std of Gaussian noise).
MAD_TO_SIGMA = 1.482602218505602
#: A residual beyond this many normalised MADs is a shot the model does not explain.
OUTLIER_SPREADS = 3.0
#: A change of the scale smaller than this many combined standard errors is not reported.
CHANGE_MIN_STANDARD_ERRORS = 3.0
#: The sign CUSUM must exceed the Kolmogorov quantile of this level to split a segment.
CHANGE_SIGNIFICANCE = 0.01
#: No segment of the change search is shorter than this.
CHANGE_MIN_SEGMENT = 10
#: The Theil-Sen fit (all pairwise slopes) uses at most this many shots, evenly spaced in time.
FIT_MAX_SHOTS = 600
#: The driver ranking uses at most this many shots, evenly spaced in time.
DRIVER_MAX_SHOTS = 500
DRIVER_RESAMPLES = 199
#: z_0.975: the half width of a 95 % interval in standard errors.
Z_INTERVAL = float(stats.norm.ppf(0.5 + CONFIDENCE / 2))


@dataclass(frozen=True)
class MedianInterval:
    """A median with its 95 % interval and standard error; None fields without values."""

    estimate: float | None
    low: float | None
    high: float | None
    standard_error: float | None
    shots: int
    method: str  # "bootstrap" | "order statistics" | "none"


def density_scale_ratio(measured_freq_hz: ArrayLike, reference_freq_unscaled_hz: ArrayLike) -> np.ndarray:
    """c = (f_meas / f_ref(n_set))^2 with f_ref at density_scale = 1 (MODEL.md section 6; f_p ∝ √n)."""
    f = np.asarray(measured_freq_hz, dtype=float)
    ref = np.asarray(reference_freq_unscaled_hz, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = (f / ref) ** 2
    return np.where(np.isfinite(ratio) & (ratio > 0), ratio, np.nan)


def _finite(values: ArrayLike) -> np.ndarray:
    v = np.asarray(values, dtype=float).ravel()
    return v[np.isfinite(v)]


def order_statistic_indices(n: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """0-based indices (low, high) into the sorted values of the distribution-free 95 % interval of
    a median of n values (Conover, Practical Nonparametric Statistics, 3rd ed., 3.2; the indices of
    scipy.stats.quantile_test(...).confidence_interval, from scipy.stats.binom without building a
    test object); low < 0 or high >= n where that side does not exist (n <= 5)."""
    count = np.asarray(n, dtype=float)
    tail = (1.0 - CONFIDENCE) / 2.0
    low = stats.binom.ppf(tail, count, 0.5).astype(int) - 1
    high = stats.binom.isf(tail, count, 0.5).astype(int)
    return low, high


def _order_statistic_interval(ordered: np.ndarray, low: int, high: int) -> MedianInterval:
    """The median of sorted finite values with its order-statistic interval (None sides where none exists)."""
    n = int(ordered.size)
    median = float(np.median(ordered))
    lo = float(ordered[low]) if 0 <= low < n else None
    hi = float(ordered[high]) if 0 <= high < n else None
    if lo is None or hi is None:
        return MedianInterval(median, lo, hi, None, n, "none")
    return MedianInterval(median, lo, hi, (hi - lo) / (2 * Z_INTERVAL), n, "order statistics")


def median_interval(values: ArrayLike, seed: int = BOOTSTRAP_SEED) -> MedianInterval:
    """Median with its 95 % interval: percentile bootstrap (scipy.stats.bootstrap) up to
    BOOTSTRAP_MAX_VALUES values, order statistics (order_statistic_indices) above."""
    v = _finite(values)
    n = int(v.size)
    if n == 0:
        return MedianInterval(None, None, None, None, 0, "none")
    median = float(np.median(v))
    if n == 1:
        return MedianInterval(median, None, None, None, 1, "none")
    if n <= BOOTSTRAP_MAX_VALUES:
        result = stats.bootstrap(
            (v,),
            np.median,
            vectorized=True,
            method="percentile",
            confidence_level=CONFIDENCE,
            n_resamples=MEDIAN_RESAMPLES,
            random_state=np.random.default_rng(seed),
        )
        low, high = float(result.confidence_interval.low), float(result.confidence_interval.high)
        return MedianInterval(median, low, high, float(result.standard_error), n, "bootstrap")
    lows, highs = order_statistic_indices(n)
    return _order_statistic_interval(np.sort(v), int(lows), int(highs))


def scale_interval(ratios: ArrayLike, seed: int = BOOTSTRAP_SEED) -> MedianInterval:
    """The density-scale estimate: median of c_i with its interval (the median commutes with ln)."""
    return median_interval(ratios, seed)


def _log_standard_error(m: MedianInterval) -> float:
    """Standard error of ln(median) from the interval on ln c (half width over z)."""
    if m.low is None or m.high is None or m.low <= 0 or m.high <= 0:
        return float("inf")
    return float((np.log(m.high) - np.log(m.low)) / (2 * Z_INTERVAL))


@dataclass(frozen=True)
class ScaleChange:
    """A change of the density scale at ``index`` (first shot of the new level)."""

    index: int
    before: MedianInterval
    after: MedianInterval
    standard_errors: float  # |ln after - ln before| / combined standard error


def _bridge(values: np.ndarray) -> np.ndarray:
    """|S_k - k S_n / n| for k = 1..n: the CUSUM bridge of a series."""
    cusum = np.cumsum(values)
    k = np.arange(1, values.size + 1)
    return np.abs(cusum - k * (cusum[-1] / values.size))


def _cusum_split(x: np.ndarray) -> tuple[int, float]:
    """Where to split x, and the sign CUSUM statistic sup|S_k - k S_n/n| / √n of the signs about the
    median (which tests it). The place is the CUSUM peak of x clipped at its median ± 3 normalised MADs:
    as robust, and sharper than the signs at locating the step."""
    n = x.size
    lo, hi = CHANGE_MIN_SEGMENT - 1, n - CHANGE_MIN_SEGMENT - 1
    if hi < lo:
        return -1, 0.0
    median = np.median(x)
    signs = np.sign(x - median)
    spread = MAD_TO_SIGMA * float(np.median(np.abs(x - median)))
    clipped = np.clip(x, median - OUTLIER_SPREADS * spread, median + OUTLIER_SPREADS * spread) if spread > 0 else signs
    sign_bridge = _bridge(signs)
    statistic = float(np.max(sign_bridge[lo : hi + 1]) / (np.sqrt(max(np.mean(signs**2), 1e-300)) * np.sqrt(n)))
    j = lo + int(np.argmax(_bridge(clipped)[lo : hi + 1]))
    return j + 1, statistic


def scale_changes(ratios: ArrayLike, seed: int = BOOTSTRAP_SEED) -> list[ScaleChange]:
    """Changes of the scale along time-ordered c_i (NaN skipped): binary segmentation of ln c by
    a two-sided sign CUSUM (split where sup|S_k - k S_n/n|/√n passes scipy.stats.kstwobign at 1 %,
    at the CUSUM peak of the clipped ln c),
    each change kept only when the medians either side differ by ≥ 3 combined standard errors."""
    c = np.asarray(ratios, dtype=float)
    where = np.flatnonzero(np.isfinite(c) & (c > 0))
    x = np.log(c[where])
    critical = float(stats.kstwobign.isf(CHANGE_SIGNIFICANCE))
    splits: list[int] = []
    pending = [(0, x.size)]
    while pending:
        start, stop = pending.pop()
        if stop - start < 2 * CHANGE_MIN_SEGMENT:
            continue
        at, statistic = _cusum_split(x[start:stop])
        if at < 0 or statistic <= critical:
            continue
        splits.append(start + at)
        pending += [(start, start + at), (start + at, stop)]
    splits.sort()
    changes: list[ScaleChange] = []
    bounds = [0, *splits, x.size]
    for i, at in enumerate(splits):
        before = median_interval(np.exp(x[bounds[i] : at]), seed)
        after = median_interval(np.exp(x[at : bounds[i + 2]]), seed)
        se = float(np.hypot(_log_standard_error(before), _log_standard_error(after)))
        assert before.estimate is not None and after.estimate is not None
        distance = abs(np.log(after.estimate) - np.log(before.estimate)) / se if se > 0 else float("inf")
        if distance >= CHANGE_MIN_STANDARD_ERRORS:
            changes.append(ScaleChange(int(where[at]), before, after, float(distance)))
    return changes


def evenly_spaced(n: int, at_most: int) -> np.ndarray:
    """Indices of at most ``at_most`` of n items spread evenly (all when n ≤ at_most)."""
    if n <= at_most:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, at_most).round().astype(int))


@dataclass(frozen=True)
class PowerLawFit:
    """ln y = ln a + b ln x, fitted by Theil-Sen, with the residual outliers."""

    prefactor: float | None
    exponent: float | None
    exponent_low: float | None
    exponent_high: float | None
    spearman: float | None
    shots: int
    fitted_shots: int
    outliers: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))  # indices into the input
    residual_spread: float | None = None


def power_law_fit(x: ArrayLike, y: ArrayLike) -> PowerLawFit:
    """Theil-Sen slope of ln y on ln x with its 95 % interval (scipy.stats.theilslopes, Sen 1968),
    Spearman ρ (scipy.stats.spearmanr) and the outliers |r| > 3 × 1.4826 × MAD of the residuals."""
    xa, ya = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        lx, ly = np.log(xa), np.log(ya)
    ok = np.flatnonzero(np.isfinite(lx) & np.isfinite(ly))
    n = int(ok.size)
    if n < 3 or np.ptp(lx[ok]) == 0:
        return PowerLawFit(None, None, None, None, None, n, 0)
    pick = ok[evenly_spaced(n, FIT_MAX_SHOTS)]
    fit = stats.theilslopes(ly[pick], lx[pick], alpha=CONFIDENCE)
    rho = float(stats.spearmanr(lx[ok], ly[ok]).statistic)
    residual = ly[ok] - (fit.intercept + fit.slope * lx[ok])
    spread = MAD_TO_SIGMA * float(np.median(np.abs(residual - np.median(residual))))
    outliers = ok[np.abs(residual - np.median(residual)) > OUTLIER_SPREADS * spread] if spread > 0 else ok[:0]
    return PowerLawFit(
        prefactor=float(np.exp(fit.intercept)),
        exponent=float(fit.slope),
        exponent_low=float(fit.low_slope),
        exponent_high=float(fit.high_slope),
        spearman=rho if np.isfinite(rho) else None,
        shots=n,
        fitted_shots=int(pick.size),
        outliers=outliers,
        residual_spread=spread,
    )


def kick_angle_proxy(wakefield_mv_m: ArrayLike, length_m: ArrayLike, momentum_gev: ArrayLike) -> np.ndarray:
    """Defocusing proxy E_wake L / p [MV/GeV] (a kick angle W/(pc)); a project proxy, not a published law."""
    return np.asarray(wakefield_mv_m, float) * np.asarray(length_m, float) / np.asarray(momentum_gev, float)


def energy_gain_proxy(wakefield_mv_m: ArrayLike, length_m: ArrayLike, saturation_length_m: ArrayLike) -> np.ndarray:
    """Gain proxy E_wake (L - L_sat) [MV] over the length behind saturation (NaN when not saturated);
    a project proxy, not a published law."""
    behind = np.asarray(length_m, float) - np.asarray(saturation_length_m, float)
    with np.errstate(invalid="ignore"):
        return np.where(behind > 0, np.asarray(wakefield_mv_m, float) * behind, np.nan)


@dataclass(frozen=True)
class DriverRank:
    field: str
    rho: float
    low: float | None
    high: float | None


def _rank_correlation(a: np.ndarray, b: np.ndarray, axis: int = -1) -> np.ndarray:
    """Pearson r of rank columns along ``axis`` (Spearman ρ when the columns are ranks)."""
    a = a - a.mean(axis=axis, keepdims=True)
    b = b - b.mean(axis=axis, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (a * b).sum(axis=axis) / np.sqrt((a * a).sum(axis=axis) * (b * b).sum(axis=axis))


def driver_sample(outcome: ArrayLike) -> np.ndarray:
    """Indices of the shots the driver ranking of an outcome uses: at most DRIVER_MAX_SHOTS of those
    with the outcome, evenly spaced in time."""
    have = np.flatnonzero(np.isfinite(np.asarray(outcome, dtype=float)))
    return have[evenly_spaced(int(have.size), DRIVER_MAX_SHOTS)]


def rank_drivers(
    outcome: ArrayLike, inputs: Mapping[str, ArrayLike], seed: int = BOOTSTRAP_SEED
) -> tuple[list[DriverRank], int]:
    """Inputs ranked by |Spearman ρ| with the outcome (scipy.stats.spearmanr) over the shots of
    driver_sample (only those values of the inputs are read), each with a percentile bootstrap interval
    (scipy.stats.bootstrap, paired) of the correlation of the ranks (scipy.stats.rankdata,
    taken once). Inputs constant over the shots are left out."""
    y = np.asarray(outcome, dtype=float)
    pick = driver_sample(y)
    if pick.size < 5:
        return [], int(pick.size)
    names: list[str] = []
    columns: list[np.ndarray] = []
    for name, values in inputs.items():
        v = np.asarray(values, dtype=float)[pick]
        if np.all(np.isfinite(v)) and np.ptp(v) > 0:
            names.append(name)
            columns.append(v)
    if not names:
        return [], int(pick.size)
    rho = [float(stats.spearmanr(y[pick], col).statistic) for col in columns]
    ranks_x = stats.rankdata(np.vstack(columns), axis=-1)
    ranks_y = np.broadcast_to(stats.rankdata(y[pick]), ranks_x.shape)
    result = stats.bootstrap(
        (ranks_y, ranks_x),
        _rank_correlation,
        paired=True,
        vectorized=True,
        axis=-1,
        method="percentile",
        confidence_level=CONFIDENCE,
        n_resamples=DRIVER_RESAMPLES,
        random_state=np.random.default_rng(seed),
    )
    low = np.atleast_1d(result.confidence_interval.low)
    high = np.atleast_1d(result.confidence_interval.high)
    ranking = [
        DriverRank(
            name,
            r,
            float(lo) if np.isfinite(lo) else None,
            float(hi) if np.isfinite(hi) else None,
        )
        for name, r, lo, hi in zip(names, rho, low, high, strict=True)
    ]
    ranking.sort(key=lambda d: -abs(d.rho) if np.isfinite(d.rho) else 0.0)
    return ranking, int(pick.size)


def segment_medians(
    ratios: ArrayLike, segments: Sequence[tuple[str, np.ndarray | slice]]
) -> list[tuple[str, MedianInterval]]:
    """Median of c_i with its order-statistic interval (order_statistic_indices, at every size: a series
    has one point per day or run, hundreds of small ones, which a bootstrap each would make slow) over
    each (label, shots) of the values; shots are a slice or indices, NaN skipped."""
    c = np.asarray(ratios, dtype=float)
    parts = [_finite(c[shots]) for _label, shots in segments]
    lows, highs = order_statistic_indices([p.size for p in parts])
    out: list[tuple[str, MedianInterval]] = []
    for (label, _shots), values, low, high in zip(segments, parts, lows.tolist(), highs.tolist(), strict=True):
        if values.size == 0:
            out.append((label, MedianInterval(None, None, None, None, 0, "none")))
        else:
            out.append((label, _order_statistic_interval(np.sort(values), low, high)))
    return out


def density_scale_ratios_from_evaluation(
    mismatch_pct: ArrayLike, gradient_pct_per_m: ArrayLike, applied_scale: float
) -> np.ndarray:
    """c_i from an evaluation made at density_scale s: (1 + frequency_mismatch_pct/100)² s, since
    f_ref(s) = √s f_ref(1) where f_ref = f_p ∝ √n_0 (no gradient; MODEL.md section 6) and trivially at
    s = 1; NaN where neither holds (z_ref moves with the density: the model must be run) or unmeasured."""
    m = np.asarray(mismatch_pct, dtype=float)
    exact = (np.asarray(gradient_pct_per_m, dtype=float) == 0.0) | (applied_scale == 1.0)
    with np.errstate(invalid="ignore"):
        ratio = (1.0 + m / 100.0) ** 2 * applied_scale
    return np.where(exact & np.isfinite(ratio) & (ratio > 0), ratio, np.nan)


def density_scale_ratios(columns: Mapping[str, ArrayLike], settings: Mapping[str, object] | None = None) -> np.ndarray:
    """c_i = (f_meas,i / f_ref(n_set,i))^2, f_ref of MODEL.md section 6 with density_scale = 1 (the
    campaign's other settings kept), so c is relative to the logged density; NaN without f_meas."""
    unscaled = dict(settings or {})
    unscaled["density_scale"] = 1.0
    table = evaluate_table(columns, unscaled)
    return density_scale_ratio(
        np.asarray(columns["measured.modulation_freq_ghz"], dtype=float),
        np.asarray(columns["measured.modulation_freq_ghz"], dtype=float)
        / (1.0 + table["frequency_mismatch_pct"] / 100.0),
    )
