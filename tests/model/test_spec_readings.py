"""Where MODEL.md leaves a choice, the reading the model takes (each reproduces the worked examples)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from scipy import constants

from model import evaluate_shot
from model.form_factors import envelope_seed_factor
from model.plasma import plasma_wavenumber, wavebreaking_field

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
EX1, EX2, EX3 = (c["input"] for c in CASES)


def _rebuild_wakefield(result, shot, factor_argument):
    n0 = shot["plasma"]["density_cm3"] * 1e6
    kp = plasma_wavenumber(n0)
    u = result["kp_sigma_r"] ** 2
    sigma_z = shot["driver"]["sigma_z_mm"] * 1e-3
    zeta_s = shot["seed"].get("position_mm", 0.0) * 1e-3 if shot["seed"]["method"] != "none" else 0.0
    n_ref_over_n0 = result["density_ratio"] * math.exp(-((zeta_s - sigma_z) ** 2) / (2 * sigma_z**2))
    n_ref_efolds = result["phase_slip_rad"] * math.sqrt(3)
    return (
        wavebreaking_field(n0)
        * n_ref_over_n0
        * u
        * envelope_seed_factor(factor_argument(u))
        * 1.5
        * kp
        * sigma_z
        / n_ref_efolds
        * result["modulation_exit"]
        / 1e6
    )


@pytest.mark.parametrize("shot", [EX1, EX2, EX3], ids=["ex-1", "ex-2", "ex-3"])
def test_wakefield_estimate_uses_h_of_a_as_written_not_h_of_u(shot):
    result = evaluate_shot(shot)
    assert result["wakefield_estimate_mv_m"] == pytest.approx(
        _rebuild_wakefield(result, shot, lambda u: u / 2), rel=1e-12
    )
    assert result["wakefield_estimate_mv_m"] != pytest.approx(_rebuild_wakefield(result, shot, lambda u: u), rel=1e-3)


@pytest.mark.parametrize("shot", [EX1, EX2, EX3], ids=["ex-1", "ex-2", "ex-3"])
def test_ion_motion_uses_the_wakefield_estimate_as_e_wake(shot):
    result = evaluate_shot(shot)
    n0 = shot["plasma"]["density_cm3"] * 1e6
    kp_xi = plasma_wavenumber(n0) * shot["driver"]["sigma_z_mm"] * 1e-3
    m_i = shot["plasma"]["ion_mass_amu"] * constants.physical_constants["atomic mass constant"][0]
    e_wake_over_e0 = result["wakefield_estimate_mv_m"] * 1e6 / wavebreaking_field(n0)
    expected = shot["plasma"]["ion_charge"] * constants.m_e / m_i * e_wake_over_e0 * kp_xi**2 / 2
    assert result["ion_motion_index"] == pytest.approx(expected, rel=1e-12)


def test_unseeded_shot_takes_the_seed_at_the_bunch_centre_and_a_bunch_without_a_cut():
    # zeta_s = 0 places the reference slice one sigma_z behind the centre; the bunch is whole (start +inf)
    result = evaluate_shot(EX3)
    assert result["seed_to_noise_efolds"] is None and result["seed_density_cm3"] == 0.0
    moved = json.loads(json.dumps(EX3))
    moved["seed"]["position_mm"] = 30.0  # ignored when unseeded
    assert evaluate_shot(moved)["efolds_exit"] == result["efolds_exit"]


def test_noise_is_shot_noise_per_skin_depth_with_the_campaign_floor():
    # eta = max(floor, (lambda(zeta_ref)/k_p)^-1/2); in ex-1 the floor 1e-3 wins, so seed/noise = ln(n_seed/(n_ref 1e-3))
    result = evaluate_shot(EX1)
    assert result["seed_to_noise_efolds"] == pytest.approx(math.log(1e3), rel=1e-12)  # n_seed = n_ref in ex-1
    no_floor = evaluate_shot(EX1, {"noise_floor": 0.0})
    sigma_z = 0.07
    line = 2e11 / (math.sqrt(2 * math.pi) * sigma_z) * math.exp(-0.125)
    eta = (line / plasma_wavenumber(4e20)) ** -0.5
    assert no_floor["seed_to_noise_efolds"] == pytest.approx(-math.log(eta), rel=1e-12)


def test_unsaturated_shot_reports_its_exit_modulation_and_a_negative_margin():
    # ex-2 does not saturate: z_ref = L, modulation_exit = delta(L) < delta_sat, margin = ln(delta(L)/delta_sat) < 0
    result = evaluate_shot(EX2)
    assert result["saturation_length_m"] is None
    assert result["growth_margin_efolds"] == pytest.approx(math.log(result["modulation_exit"]), rel=1e-12)
    assert result["divergence_ratio"] == pytest.approx(6.0 / result["waist_beta_m"], rel=1e-12)


def test_saturated_shot_sets_z_ref_to_the_saturation_length():
    result = evaluate_shot(EX1)
    assert result["modulation_exit"] == 1.0
    assert result["divergence_ratio"] == pytest.approx(
        result["saturation_length_m"] / result["waist_beta_m"], rel=1e-12
    )
    assert result["efolds_exit"] * (result["saturation_length_m"] / 8.0) ** (2 / 3) == pytest.approx(
        result["phase_slip_rad"] * math.sqrt(3), rel=1e-12
    )


def test_flags_report_the_metric_value_and_the_limit_that_was_crossed():
    flags = {f["code"]: f for f in evaluate_shot(EX2)["flags"]}
    assert flags["BEAM_TOO_WIDE"]["limit"] == 3.0  # outside: the outside limit
    assert flags["PHASE_DRIFT"]["limit"] == pytest.approx(2 * math.pi)  # marginal: the marginal limit
    assert flags["PHASE_DRIFT"]["value"] == pytest.approx(12.014282306190045, rel=1e-9)  # the |error|


def test_unseeded_flag_has_no_value_or_limit_and_asymptotic_flag_reports_validity_against_0_1():
    flags = {f["code"]: f for f in evaluate_shot(EX3)["flags"]}
    assert flags["UNSEEDED"]["value"] is None and flags["UNSEEDED"]["limit"] is None
    assert flags["ASYMPTOTIC_LIMIT"] == {**flags["ASYMPTOTIC_LIMIT"], "severity": "info", "limit": 0.1}
    assert flags["ASYMPTOTIC_LIMIT"]["value"] == pytest.approx(0.15544986189060778, rel=1e-9)


def test_offset_and_angle_add_as_magnitudes_of_their_x_y_vectors():
    # x_eff = |(x, y)| + |(theta_x, theta_y)| z_ref / 2: an x offset counts the same as a y offset
    turned = json.loads(json.dumps(EX3))
    turned["driver"]["offset_y_mm"], turned["driver"]["offset_x_mm"] = 0.05, 0.0
    turned["driver"]["angle_y_mrad"], turned["driver"]["angle_x_mrad"] = 0.02, 0.0
    assert evaluate_shot(turned)["hosing_ratio"] == pytest.approx(evaluate_shot(EX3)["hosing_ratio"], rel=1e-14)
