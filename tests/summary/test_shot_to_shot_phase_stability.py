"""The shot-to-shot phase-stability figures shared by the weekly summary and the overview
(app.services.phase_spread), checked on invented series against the plain-Python
reference in tests/shot_to_shot_reference.py."""

from __future__ import annotations

import math
import statistics

import numpy as np
import pytest

from app.services.phase_spread import NEIGHBOUR_WINDOW_SHOTS, phase_jitter
from tests.support import shot_to_shot_reference as reference


def normalised_mad(values):
    """1.4826 x the median absolute deviation: the std of Gaussian data (Rousseeuw & Croux, JASA 88, 1273 (1993))."""
    centre = statistics.median(values)
    return 1.482602218505602 * statistics.median(abs(v - centre) for v in values)


def test_the_robust_spread_of_gaussian_jitter_is_its_standard_deviation():
    rng = np.random.default_rng(3)
    jitter = phase_jitter(0.05 * rng.standard_normal(4000), np.full(4000, np.nan), np.full(4000, np.nan))
    assert jitter.measured_phase_std_rad == pytest.approx(0.05, rel=0.05)


def test_the_window_is_fifteen_neighbouring_shots():
    assert NEIGHBOUR_WINDOW_SHOTS == reference.WINDOW == 15


def test_a_density_scan_of_two_set_points_10_pct_apart_gives_the_0_1_pct_shot_to_shot_jitter_not_5_pct():
    rng = np.random.default_rng(21)
    set_point = np.where(np.arange(400) < 200, 5.0e14, 5.5e14)
    density = set_point * (1 + 0.001 * rng.standard_normal(set_point.size))
    per_pct = np.full(set_point.size, 0.8)
    phase = 0.3 + 0.8 * 100 * (density / set_point - 1)  # the phase follows the density jitter
    jitter = phase_jitter(phase, density, per_pct)
    assert jitter.density_spread_pct == pytest.approx(0.1, rel=0.3)
    assert jitter.density_spread_pct == pytest.approx(reference.density_jitter_pct(density.tolist()), rel=1e-9)
    assert 100 * np.std(density, ddof=1) / np.mean(density) > 4  # the whole-set spread the scan would give
    assert jitter.expected_phase_jitter_rad == pytest.approx(0.8 * jitter.density_spread_pct, rel=1e-12)
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    assert jitter.measured_phase_std_rad == pytest.approx(0.08, rel=0.3)


def test_a_phase_set_point_step_counts_only_in_the_shots_within_a_window_of_it():
    rng = np.random.default_rng(5)
    phase = np.where(np.arange(120) < 60, -1.0, 1.5) + 0.02 * rng.standard_normal(120)
    jitter = phase_jitter(phase, np.full(120, np.nan), np.full(120, np.nan))
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    # The running circular mean blurs the step over the 14 shots around it; the robust spread
    # sees the 0.02 rad jitter of the other 106 shots, not a 1.25 rad spread.
    assert jitter.measured_phase_std_rad < 0.05
    assert np.std(phase, ddof=1) > 1.2
    assert jitter.density_spread_pct is None and jitter.expected_phase_jitter_rad is None


def test_phases_straddling_plus_minus_pi_still_give_a_small_shot_to_shot_spread():
    rng = np.random.default_rng(8)
    phase = np.angle(np.exp(1j * (math.pi + 0.03 * rng.standard_normal(100))))  # either side of +-pi
    assert phase.min() < -3 and phase.max() > 3
    jitter = phase_jitter(phase, np.full(100, 4e14), np.full(100, 0.5))
    assert jitter.measured_phase_std_rad < 0.05
    assert jitter.measured_phase_std_rad == pytest.approx(reference.phase_jitter_rad(phase.tolist()), rel=1e-9)
    assert np.std(phase, ddof=1) > 3  # what a plain std about the plain mean would say


def test_fewer_shots_than_the_window_fall_back_to_the_whole_set_figures():
    density = [4.00e14, 4.02e14, 3.98e14, 4.01e14, 4.40e14, 4.41e14]
    phase = [0.10, 0.15, 0.05, 3.10, -3.12, 0.12]
    jitter = phase_jitter(phase, density, [0.6] * len(density))
    mean_density = statistics.fmean(density)
    relative = [100 * (d - mean_density) / mean_density for d in density]
    assert jitter.density_spread_pct == pytest.approx(normalised_mad(relative), rel=1e-12)
    mean = math.atan2(sum(math.sin(p) for p in phase), sum(math.cos(p) for p in phase))
    wrapped = [math.atan2(math.sin(p - mean), math.cos(p - mean)) for p in phase]
    assert jitter.measured_phase_std_rad == pytest.approx(normalised_mad(wrapped), rel=1e-12)
    assert jitter.expected_phase_jitter_rad == pytest.approx(0.6 * jitter.density_spread_pct, rel=1e-12)


def test_absent_values_are_skipped_and_one_value_gives_no_figure():
    jitter = phase_jitter([0.2, math.nan], [math.nan, 4e14], [math.nan, math.nan])
    assert (jitter.phase_count, jitter.density_count) == (1, 1)
    assert jitter.measured_phase_std_rad is None and jitter.density_spread_pct is None
    assert jitter.phase_per_pct_density_rad is None and jitter.expected_phase_jitter_rad is None
