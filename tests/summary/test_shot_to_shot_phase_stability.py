"""The shot-to-shot phase-stability figures shared by the weekly summary and the overview
(app.services.phase_spread), checked on invented series against the plain-Python
reference in tests/support/shot_to_shot_reference.py, and the expected jitter's budget
over the logged jitter sources (model version 2, item 7)."""

from __future__ import annotations

import json
import math
from math import factorial
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, special

import model
from app.services.phase_spread import (
    JITTER_SOURCES,
    MEDIAN_OF_NEIGHBOURS_VARIANCE,
    NEIGHBOUR_WINDOW_SHOTS,
    phase_jitter,
    phase_jitter_by_part,
    typical_phase_derivatives,
)
from model.inputs import shot_to_columns
from tests.support import shot_to_shot_reference as reference

DENSITY = "plasma.density_cm3"
REFERENCE_CASES = Path(__file__).parents[1] / "data" / "reference_cases.json"


def density_only(density, slope):
    return {DENSITY: np.asarray(density, dtype=float)}, {DENSITY: slope}


def test_the_robust_spread_of_gaussian_jitter_is_its_standard_deviation_without_the_8_pct_low_bias():
    # Including the shot in its own running median read 0.92 of the true jitter (measured on the
    # first release); leaving it out and correcting for the neighbours' median reads 1.00.
    rng = np.random.default_rng(3)
    density = 4e14 * np.exp(0.002 * rng.standard_normal(20000))
    phase = 0.05 * rng.standard_normal(20000)
    sources, slopes = density_only(density, 30.0)
    jitter = phase_jitter(phase, sources, slopes)
    assert jitter.density_spread_pct == pytest.approx(0.2, rel=0.03)
    assert jitter.measured_phase_std_rad == pytest.approx(0.05, rel=0.03)


def test_the_median_of_neighbours_variance_is_the_order_statistics_integral():
    # Variance of (X_(7) + X_(8)) / 2 of 14 unit Gaussians from the joint density of adjacent order
    # statistics (David & Nagaraja, Order Statistics, 3rd ed. (2003), eq. 2.2.2), by scipy dblquad.
    n, k = 14, 7
    c = factorial(n) / (factorial(k - 1) * factorial(n - k - 1))
    # The unit Gaussian's density and distribution function as scipy.stats.norm computes them
    # (exp(-x^2/2)/sqrt(2 pi) and special.ndtr), called directly: the frozen-distribution call
    # costs more than the integrand itself, over the many thousand points dblquad asks for.
    cdf = special.ndtr

    def f(x: float) -> float:
        return math.exp(-x * x / 2) / math.sqrt(2 * math.pi)

    def density(y, x):
        return ((x + y) / 2) ** 2 * c * cdf(x) ** (k - 1) * f(x) * f(y) * (1 - cdf(y)) ** (n - k - 1)

    value, _ = integrate.dblquad(density, -10, 10, lambda x: x, lambda x: 10, epsabs=1e-12, epsrel=1e-10)
    assert MEDIAN_OF_NEIGHBOURS_VARIANCE == pytest.approx(value, rel=1e-8)
    assert MEDIAN_OF_NEIGHBOURS_VARIANCE == reference.MEDIAN_OF_14_VARIANCE


def test_the_window_is_the_shot_and_fourteen_neighbours():
    assert NEIGHBOUR_WINDOW_SHOTS == reference.WINDOW == 15


def test_a_density_scan_of_two_set_points_10_pct_apart_gives_the_0_1_pct_shot_to_shot_jitter_not_5_pct():
    rng = np.random.default_rng(21)
    set_point = np.where(np.arange(400) < 200, 5.0e14, 5.5e14)
    density = set_point * (1 + 0.001 * rng.standard_normal(set_point.size))
    phase = 0.3 + 0.8 * 100 * (density / set_point - 1)  # the phase follows the density jitter
    sources, slopes = density_only(density, 80.0)  # d psi / d ln n = 80 rad: 0.8 rad per 1 %
    jitter = phase_jitter(phase, sources, slopes)
    assert jitter.density_spread_pct == pytest.approx(0.1, rel=0.3)
    assert jitter.density_spread_pct == pytest.approx(reference.density_jitter_pct(density.tolist()), rel=1e-9)
    assert 100 * np.std(density, ddof=1) / np.mean(density) > 4  # the whole-set spread the scan would give
    assert jitter.phase_per_pct_density_rad == pytest.approx(0.8)
    assert jitter.expected_phase_jitter_rad == pytest.approx(0.8 * jitter.density_spread_pct, rel=1e-12)
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    assert jitter.measured_phase_std_rad == pytest.approx(jitter.expected_phase_jitter_rad, rel=0.15)


def test_a_phase_set_point_step_counts_only_in_the_shots_within_a_window_of_it():
    rng = np.random.default_rng(5)
    phase = np.where(np.arange(120) < 60, -1.0, 1.5) + 0.02 * rng.standard_normal(120)
    jitter = phase_jitter(phase, {DENSITY: np.full(120, np.nan)}, {DENSITY: None})
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    # The neighbours' circular mean blurs the step over the 14 shots around it; the robust spread
    # sees the 0.02 rad jitter of the other 106 shots, not a 1.25 rad spread.
    assert jitter.measured_phase_std_rad < 0.05
    assert np.std(phase, ddof=1) > 1.2
    assert jitter.density_spread_pct is None and jitter.expected_phase_jitter_rad is None


def test_phases_straddling_plus_minus_pi_still_give_a_small_shot_to_shot_spread():
    rng = np.random.default_rng(8)
    phase = np.angle(np.exp(1j * (math.pi + 0.03 * rng.standard_normal(100))))  # either side of +-pi
    assert phase.min() < -3 and phase.max() > 3
    jitter = phase_jitter(phase, *density_only(np.full(100, 4e14), 50.0))
    assert jitter.measured_phase_std_rad < 0.05
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    assert np.std(phase, ddof=1) > 3  # what a plain std about the plain mean would say
    assert jitter.expected_phase_jitter_rad == 0.0  # a constant density adds nothing


def test_fewer_shots_than_the_window_compare_each_shot_with_all_the_others():
    density = [4.00e14, 4.02e14, 3.98e14, 4.01e14, 4.40e14, 4.41e14]
    phase = [0.10, 0.15, 0.05, 3.10, -3.12, 0.12]
    jitter = phase_jitter(phase, *density_only(density, 60.0))
    assert jitter.density_spread_pct == pytest.approx(reference.density_jitter_pct(density), rel=1e-12)
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase), rel=1e-12)
    assert jitter.expected_phase_jitter_rad == pytest.approx(0.6 * jitter.density_spread_pct, rel=1e-12)


def test_absent_values_are_skipped_and_one_value_gives_no_figure():
    jitter = phase_jitter([0.2, math.nan], {DENSITY: [math.nan, 4e14]}, {DENSITY: None})
    assert (jitter.phase_count, jitter.density_count) == (1, 1)
    assert jitter.measured_phase_std_rad is None and jitter.density_spread_pct is None
    assert jitter.phase_per_pct_density_rad is None and jitter.expected_phase_jitter_rad is None


def test_the_expected_jitter_is_the_root_sum_square_of_every_logged_source_with_its_budget():
    rng = np.random.default_rng(11)
    n = 3000
    widths = {
        "plasma.density_cm3": 0.001,
        "driver.population": 0.02,
        "driver.sigma_z_mm": 0.01,
        "driver.sigma_r_mm": 0.005,
    }
    slopes = {"plasma.density_cm3": 90.0, "driver.population": -3.0, "driver.sigma_z_mm": 4.0, "driver.sigma_r_mm": 1.5}
    sources = {path: 1.0 * np.exp(w * rng.standard_normal(n)) for path, w in widths.items()}
    phase = sum(slopes[p] * np.log(sources[p]) for p in widths) + 0.0 * rng.standard_normal(n)
    jitter = phase_jitter(phase, sources, slopes)
    for path, w in widths.items():
        assert jitter.spread_pct[path] == pytest.approx(100 * w, rel=0.06)
        assert jitter.expected_by_source_rad[path] == pytest.approx(abs(slopes[path]) * w, rel=0.06)
    rss = math.sqrt(sum((slopes[p] * w) ** 2 for p, w in widths.items()))
    assert jitter.expected_phase_jitter_rad == pytest.approx(rss, rel=0.05)
    assert jitter.measured_phase_std_rad == pytest.approx(rss, rel=0.08)  # the phase is exactly that sum


def test_typical_derivatives_are_the_median_of_the_models_own_central_differences():
    case = json.loads(REFERENCE_CASES.read_text())[0]["input"]
    one, _ = shot_to_columns(case)
    scale = np.linspace(0.9, 1.1, 7)  # seven shots at different densities
    columns = {path: np.repeat(values, 7) for path, values in one.items()}
    columns[DENSITY] = columns[DENSITY] * scale
    typical = typical_phase_derivatives(columns, None)
    direct = model.wake_phase_derivatives(columns, None)
    for path in JITTER_SOURCES:
        assert typical[path] == pytest.approx(float(np.nanmedian(direct[path])), rel=1e-12)
    # The density term is dominated by k_p xi_ref / 2 (MODEL.md section 5): d(k_p xi)/d ln n = k_p xi / 2.
    assert typical[DENSITY] > 0


def test_the_overviews_groups_of_shots_get_the_same_figures_computed_together_as_one_by_one():
    # The overview's phase chart computes its 80 groups in one numpy call per length of group.
    rng = np.random.default_rng(11)
    n = 2003
    phase = 0.3 * rng.standard_normal(n)
    sources = {path: 1e14 * np.exp(0.01 * rng.standard_normal(n)) for path in JITTER_SOURCES}
    slopes = {path: 0.5 + i for i, path in enumerate(JITTER_SOURCES)}
    edges = np.linspace(0, n, 81).round().astype(int).tolist()
    parts = list(zip(edges[:-1], edges[1:], strict=True))
    one_by_one = [phase_jitter(phase[lo:hi], {p: v[lo:hi] for p, v in sources.items()}, slopes) for lo, hi in parts]
    together = phase_jitter_by_part(phase, sources, slopes, parts)
    assert len({hi - lo for lo, hi in parts}) == 2  # groups of two lengths
    for a, b in zip(one_by_one, together, strict=True):
        assert (a.phase_count, a.density_count) == (b.phase_count, b.density_count)
        assert b.measured_phase_std_rad == pytest.approx(a.measured_phase_std_rad, rel=1e-12)
        assert b.expected_phase_jitter_rad == pytest.approx(a.expected_phase_jitter_rad, rel=1e-12)
        assert b.spread_pct == pytest.approx(a.spread_pct, rel=1e-12)
        assert b.expected_by_source_rad == pytest.approx(a.expected_by_source_rad, rel=1e-12)


def test_groups_with_a_missing_value_or_fewer_shots_than_the_window_are_computed_one_by_one_the_same():
    rng = np.random.default_rng(12)
    phase = 0.3 * rng.standard_normal(60)
    phase[17] = np.nan  # a shot without a measured phase
    sources = {DENSITY: 4e14 * np.exp(0.002 * rng.standard_normal(60))}
    parts = [(0, 10), (10, 40), (40, 60)]  # the first shorter than the window
    together = phase_jitter_by_part(phase, sources, {DENSITY: 1.0}, parts)
    for (lo, hi), b in zip(parts, together, strict=True):
        assert b == phase_jitter(phase[lo:hi], {DENSITY: sources[DENSITY][lo:hi]}, {DENSITY: 1.0})
    assert together[1].phase_count == 29


def test_the_neighbours_median_is_numpys_median_to_the_last_bit():
    # The running median is taken by sorting each window (quicker than np.median's partition
    # for windows of 14): the figures must not move by even one rounding.
    from app.services.phase_spread import _median_of_windows

    rng = np.random.default_rng(11)
    for shape in [(20000, NEIGHBOUR_WINDOW_SHOTS - 1), (300, 15), (80, 250), (7, 3, 14), (5, 1)]:
        windows = np.log(4e14 * (1 + 0.002 * rng.standard_normal(shape)))
        windows[..., 0] = windows[..., -1]  # ties too
        assert np.array_equal(_median_of_windows(windows), np.median(windows, axis=-1))
