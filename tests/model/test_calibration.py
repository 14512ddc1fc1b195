"""The model against measurement (MODEL.md, "Model against measurement"): the density scale and its
interval, its changes, the power-law checks and the driver ranking, on invented data with known
truths. The statistics are scipy's; the checks below name where each method is published."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from model import calibration as cal
from model import evaluate_shot, evaluate_table
from tests.support.calibration_shots import synthetic_columns


def _noisy_scale(n: int, scale: float, noise: float, seed: int) -> np.ndarray:
    return scale * np.exp(noise * np.random.default_rng(seed).standard_normal(n))


@pytest.mark.parametrize("n", [300, 5000])
def test_a_known_scale_of_1_021_is_recovered_inside_its_interval(n):
    # median with a percentile bootstrap interval (Efron & Tibshirani, An Introduction to the Bootstrap, 1993, ch. 13)
    # up to 1000 values, the order-statistic interval above (Conover, Practical Nonparametric Statistics, 3rd ed., 3.2)
    c = _noisy_scale(n, 1.021, 0.006, seed=n)
    m = cal.scale_interval(c)
    assert m.low < 1.021 < m.high and m.shots == n
    assert m.method == ("bootstrap" if n <= cal.BOOTSTRAP_MAX_VALUES else "order statistics")
    # 95 % of a Gaussian sample's median lies within 1.96 × 1.2533 σ/√n (asymptotic efficiency of the median;
    # common practice, no source): the interval is about that wide
    expected_half_width = 1.96 * 1.2533 * 0.006 * 1.021 / np.sqrt(n)
    assert (m.high - m.low) / 2 == pytest.approx(expected_half_width, rel=0.35)


def test_the_interval_is_reproducible_with_its_fixed_seed():
    c = _noisy_scale(400, 1.01, 0.01, seed=2)
    assert cal.scale_interval(c) == cal.scale_interval(c.copy())


def test_c_is_relative_to_the_logged_density_whatever_scale_is_applied(reference_cases):
    # c = (f_meas / f_ref(n_set))² with f_ref at density_scale = 1 (MODEL.md section 6 and the project section)
    columns = synthetic_columns(reference_cases[0]["input"], 50, scale=1.021, frequency_noise=0.0, seed=1)
    c = cal.density_scale_ratios(columns, {})
    assert np.allclose(c, 1.021, rtol=1e-9)  # no gradient: f_ref = f_p ∝ √n (NRL Plasma Formulary)
    assert np.array_equal(cal.density_scale_ratios(columns, {"density_scale": 1.5}), c)
    # with the estimate applied the mismatch of every shot is zero
    applied = evaluate_table(columns, {"density_scale": float(np.median(c))})
    assert np.allclose(applied["frequency_mismatch_pct"], 0.0, atol=1e-9)


def test_with_a_gradient_c_is_the_implied_over_logged_density_at_scale_one(reference_cases):
    shot = reference_cases[0]["input"]  # ex-1 has a gradient: f_ref = f_p √(1 + g z_ref)
    shot = {**shot, "measured": {"modulation_freq_ghz": 190.0}}
    ev = evaluate_shot(shot)
    columns = {"measured.modulation_freq_ghz": np.array([190.0])}
    for section in ("driver", "plasma", "seed"):
        for key, value in shot[section].items():
            columns[f"{section}.{key}"] = np.array([value], dtype=object if isinstance(value, str) else float)
    c = cal.density_scale_ratios(columns, {"density_scale": 1.3})
    assert c[0] == pytest.approx(ev["implied_density_cm3"] / shot["plasma"]["density_cm3"], rel=1e-12)


def test_a_step_in_the_scale_is_found_within_a_few_shots_of_where_it_was_put():
    # CUSUM change-point detection (Page, Biometrika 41, 100 (1954)) by binary segmentation
    # (Scott & Knott, Biometrics 30, 507 (1974)); sign CUSUM threshold from the Kolmogorov distribution
    for seed in range(5):
        c = _noisy_scale(800, 1.015, 0.004, seed)
        c[500:] *= 1.03 / 1.015
        changes = cal.scale_changes(c)
        assert len(changes) == 1, seed
        change = changes[0]
        assert abs(change.index - 500) <= 5
        assert change.before.low < 1.015 < change.before.high
        assert change.after.low < 1.03 < change.after.high
        assert change.before.shots + change.after.shots == 800
        assert change.standard_errors >= cal.CHANGE_MIN_STANDARD_ERRORS


def test_no_change_is_reported_on_stationary_data():
    for seed in range(20):
        c = _noisy_scale(1500, 1.02, 0.01, 100 + seed)
        c[np.random.default_rng(seed).integers(0, 1500, 10)] *= 1.2  # a few wild shots are not a change
        assert cal.scale_changes(c) == [], seed


def test_a_change_smaller_than_three_standard_errors_is_not_reported():
    c = _noisy_scale(400, 1.0, 0.02, seed=9)
    c[200:] *= 1.001  # 0.1 % against a 0.2 % standard error of each half's median
    assert cal.scale_changes(c) == []


def test_a_power_law_with_a_known_exponent_is_recovered_within_its_interval():
    # Theil-Sen slope and its interval (Sen, JASA 63, 1379 (1968)), scipy.stats.theilslopes
    rng = np.random.default_rng(4)
    x = np.exp(rng.uniform(0, 3, 2000))
    y = 0.35 * x**0.8 * np.exp(0.03 * rng.standard_normal(2000))
    y[[10, 700]] *= 3.0
    fit = cal.power_law_fit(x, y)
    assert fit.exponent_low <= 0.8 <= fit.exponent_high
    assert fit.prefactor == pytest.approx(0.35, rel=0.03)
    assert {10, 700} <= set(fit.outliers.tolist())
    assert fit.fitted_shots == cal.FIT_MAX_SHOTS and fit.shots == 2000
    # Spearman's ρ as scipy computes it (Spearman, Am. J. Psychol. 15, 72 (1904))
    assert fit.spearman == pytest.approx(stats.spearmanr(np.log(x), np.log(y)).statistic)
    # the outlier rule is 3 × the normalised MAD (1.4826 = 1/Φ⁻¹(3/4); Rousseeuw & Croux, JASA 88, 1273 (1993))
    assert cal.MAD_TO_SIGMA == pytest.approx(1 / stats.norm.ppf(0.75))
    assert fit.residual_spread == pytest.approx(0.03, rel=0.1)


def test_the_proxies_are_the_project_formulas():
    assert cal.kick_angle_proxy(100.0, 10.0, 400.0) == pytest.approx(2.5)
    gain = cal.energy_gain_proxy(np.array([100.0, 100.0]), np.array([10.0, 10.0]), np.array([4.0, np.nan]))
    assert gain[0] == pytest.approx(600.0) and np.isnan(gain[1])  # not saturated: left out


def test_the_driver_of_an_outcome_comes_first_with_an_interval_around_its_rho():
    rng = np.random.default_rng(8)
    n = 3000
    density = rng.uniform(1, 2, n)
    inputs = {
        "plasma.density_cm3": density,
        "driver.population": rng.uniform(1, 2, n),
        "plasma.length_m": np.full(n, 10.0),
    }
    outcome = density**0.5 * np.exp(0.05 * rng.standard_normal(n))
    ranking, used = cal.rank_drivers(outcome, inputs)
    assert used == cal.DRIVER_MAX_SHOTS
    assert [d.field for d in ranking] == ["plasma.density_cm3", "driver.population"]  # a constant input is left out
    top = ranking[0]
    assert top.low <= top.rho <= top.high and top.rho > 0.8
    assert ranking[1].low < 0 < ranking[1].high  # unrelated: its interval holds zero
    pick = cal.evenly_spaced(n, cal.DRIVER_MAX_SHOTS)
    assert top.rho == pytest.approx(stats.spearmanr(outcome[pick], density[pick]).statistic)


@pytest.mark.parametrize("n", [6, 7, 20, 101, 1001, 5000])
def test_the_order_statistic_interval_is_the_one_scipy_s_quantile_test_gives(n):
    # the distribution-free interval of a median from the binomial distribution of the count below it
    # (Conover, Practical Nonparametric Statistics, 3rd ed., 3.2), as scipy.stats.quantile_test computes it
    values = _noisy_scale(n, 1.02, 0.01, seed=n)
    ci = stats.quantile_test(values, q=1.0, p=0.5).confidence_interval(cal.CONFIDENCE)
    low, high = cal.order_statistic_indices(n)
    ordered = np.sort(values)
    assert (ordered[low], ordered[high]) == (ci.low, ci.high)
    [(_, point)] = cal.segment_medians(values, [("all", slice(None))])
    assert (point.low, point.high, point.method) == (ci.low, ci.high, "order statistics")
    if n > cal.BOOTSTRAP_MAX_VALUES:
        m = cal.median_interval(values)
        assert (m.low, m.high, m.method) == (ci.low, ci.high, "order statistics")


def test_a_series_point_of_five_shots_or_fewer_has_its_median_but_no_interval():
    values = _noisy_scale(20, 1.02, 0.01, seed=3)
    points = dict(
        cal.segment_medians(
            values, [("five", np.arange(5)), ("every other", np.arange(0, 20, 2)), ("none", np.arange(0))]
        )
    )
    assert points["five"].estimate == pytest.approx(np.median(values[:5]))
    assert points["five"].low is None and points["five"].high is None and points["five"].method == "none"
    assert points["every other"].estimate == pytest.approx(np.median(values[::2]))
    assert points["every other"].low <= points["every other"].estimate <= points["every other"].high
    assert points["none"].shots == 0 and points["none"].estimate is None


def test_c_from_a_stored_evaluation_is_the_model_s_where_it_is_exact_and_left_to_the_model_elsewhere(reference_cases):
    # f_ref(s) = √s f_ref(1) where f_ref = f_p ∝ √n_0 (no gradient; NRL Plasma Formulary), and trivially at s = 1
    columns = synthetic_columns(reference_cases[0]["input"], 40, scale=1.021, seed=4)
    columns["plasma.gradient_pct_per_m"][20:] = 0.3  # half the shots with a gradient: f_ref = f_p √(1 + g z_ref)
    for applied in (1.0, 1.5):
        stored = evaluate_table(columns, {"density_scale": applied})
        c = cal.density_scale_ratios_from_evaluation(
            stored["frequency_mismatch_pct"], columns["plasma.gradient_pct_per_m"], applied
        )
        model_c = cal.density_scale_ratios(columns, {"density_scale": applied})
        exact = slice(None) if applied == 1.0 else slice(0, 20)
        assert np.allclose(c[exact], model_c[exact], rtol=1e-13, atol=0)
        if applied != 1.0:
            assert np.isnan(c[20:]).all()  # z_ref moves with the density: the model must run for these
    unmeasured = cal.density_scale_ratios_from_evaluation(np.array([np.nan]), np.array([0.0]), 1.2)
    assert np.isnan(unmeasured).all()
