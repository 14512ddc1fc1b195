"""The model's physics functions (model.seed, model.growth, model.phase, model.competing) on one shot and on arrays,
the growth curves of one shot, and the output units."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from model import (
    DEFAULT_SETTINGS,
    INPUT_FIELDS,
    OUTPUT_FIELDS,
    OUTPUT_NAMES,
    OUTPUTS_BY_NAME,
    SPECIES,
    competing,
    efolds_along_bunch,
    evaluate_shot,
    growth,
    growth_along_plasma,
    phase,
    seed,
)
from model.form_factors import gaussian_on_axis_factor
from model.vocabulary import codes_of

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
EX1, EX2, EX3, EX4, EX5 = (c["input"] for c in CASES)


def one_row(shot):
    """The shot as one-row dotted-path columns, as the dashboard builds them."""
    return {f.path: [shot.get(f.path.split(".")[0], {}).get(f.path.split(".")[1])] for f in INPUT_FIELDS}


def test_every_output_name_has_a_unit_and_nothing_else_does():
    assert [f.name for f in OUTPUT_FIELDS] == list(OUTPUT_NAMES) == list(OUTPUTS_BY_NAME)
    assert all(isinstance(f.unit, str) and f.description for f in OUTPUT_FIELDS)
    assert OUTPUTS_BY_NAME["efolds_exit"].unit == "e-folds" and OUTPUTS_BY_NAME["modulation_exit"].unit == ""


def test_driver_mass_and_charge_per_species_for_one_shot_and_for_an_array():
    # MODEL.md section 2: proton (m_p, +1), electron (m_e, -1), positron (m_e, +1), ion (A u, q)
    mass, charge = seed.driver_mass_and_charge(
        ["proton", "electron", "positron", "ion"], [np.nan, np.nan, np.nan, 207.2], [np.nan, np.nan, np.nan, 30]
    )
    u = constants.physical_constants["atomic mass constant"][0]
    np.testing.assert_array_equal(mass, [constants.m_p, constants.m_e, constants.m_e, 207.2 * u])
    np.testing.assert_array_equal(charge, [1.0, -1.0, 1.0, 30.0])
    one_mass, one_charge = seed.driver_mass_and_charge("electron", np.nan, np.nan)
    assert float(one_mass) == constants.m_e and float(one_charge) == -1.0


def test_relative_noise_is_shot_noise_per_skin_depth_unless_the_floor_is_higher_and_never_above_one():
    # MODEL.md section 3: eta = min(1, max(floor, (lambda/k_p)^(-1/2)))
    kp = 5000.0
    assert seed.relative_noise(kp * 1e4, kp, 1e-3) == pytest.approx(1e-2, rel=1e-15)
    assert seed.relative_noise(kp * 1e8, kp, 1e-3) == 1e-3
    np.testing.assert_allclose(seed.relative_noise(np.array([kp * 1e4, kp * 1e8]), kp, 0.0), [1e-2, 1e-4], rtol=1e-15)
    np.testing.assert_array_equal(seed.relative_noise(np.array([kp * 0.01, 0.0]), kp, 1e-3), [1.0, 1.0])


def test_electron_bunch_seed_field_stays_finite_in_logs_where_its_form_factor_underflows():
    # exp(-(k_p sigma_zs)^2/2) = exp(-5000) is below the smallest double; its logarithm is not
    kp = 1e5
    log_field = seed.log_electron_bunch_seed_field(1e-10, 1e-3, kp, gaussian_on_axis_factor(0.5 * (kp * 1e-4) ** 2))
    assert math.isfinite(log_field) and log_field < -4000


def test_phase_functions_follow_the_slip_of_n_over_root_3():
    # slip N/sqrt(3): Schroeder et al., PRL 107, 145002 (2011); Pukhov et al., PRL 107, 145003 (2011) (MODEL.md 5)
    n, kp, xi, z = np.array([3.0, 12.0]), 1900.0, 0.07, 4.0
    np.testing.assert_allclose(phase.phase_slip(n), n / math.sqrt(3.0), rtol=1e-15)
    np.testing.assert_allclose(phase.phase_velocity_deficit(n, kp, z), 2 * n / (3 * math.sqrt(3) * kp * z), rtol=1e-15)
    # the compensating gradient g cancels the slip rate at z: its phase drift k_p xi g/2 per metre equals
    # d(N/sqrt(3))/dz = 2N/(3 sqrt(3) z) (N ~ z^(2/3)), i.e. k_p times the phase velocity deficit
    g = phase.compensating_gradient_pct_per_m(n, kp, xi, z) / 100.0
    np.testing.assert_allclose(kp * xi * g / 2.0, kp * phase.phase_velocity_deficit(n, kp, z), rtol=1e-14)


def test_effective_offset_and_divergence_ratio_work_on_one_shot_and_arrays():
    assert competing.effective_offset(1e-4, 2e-5, 4.0) == pytest.approx(1e-4 + 4e-5, rel=1e-15)
    np.testing.assert_allclose(competing.divergence_ratio(np.array([1.0, 2.0]), 1e-8, 2e-4), [0.25, 0.5], rtol=1e-14)
    assert competing.divergence_ratio(3.0, 0.0, 2e-4) == 0.0  # cold beam: beta* infinite


@pytest.mark.parametrize("shot", [EX1, EX2, EX3], ids=["ex-1", "ex-2", "ex-3"])
def test_growth_along_the_plasma_ends_at_the_shots_exit_values(shot):
    result = evaluate_shot(shot)
    length = shot["plasma"]["length_m"]
    curve = growth_along_plasma(one_row(shot), np.linspace(0.0, length, 9))
    assert curve["efolds"][0] == 0.0 and curve["modulation"][0] == 0.0
    assert curve["efolds"][-1] == result["efolds_exit"]
    delta_exit = DEFAULT_SETTINGS["saturation_modulation"] * math.exp(result["growth_margin_efolds"])
    assert curve["modulation"][-1] == pytest.approx(delta_exit, rel=1e-13)
    assert np.all(np.diff(curve["efolds"]) > 0) and np.all(np.diff(curve["modulation"]) > 0)


@pytest.mark.parametrize("shot", [EX1, EX2, EX3], ids=["ex-1", "ex-2", "ex-3"])
def test_efolds_along_the_bunch_pass_through_the_reference_slice(shot):
    sigma_z = shot["driver"]["sigma_z_mm"] * 1e-3
    xi = np.array([0.5, 1.0, 2.0]) * sigma_z
    n = efolds_along_bunch(one_row(shot), xi)
    assert n[1] == pytest.approx(evaluate_shot(shot)["efolds_exit"], rel=1e-14)
    assert n[0] < n[1] < n[2]


def test_growth_curves_refuse_a_table_of_several_shots_and_negative_distances():
    two = {path: values * 2 for path, values in one_row(EX1).items()}
    with pytest.raises(ValueError, match="one shot"):
        growth_along_plasma(two, [1.0])
    with pytest.raises(ValueError, match="xi_m"):
        efolds_along_bunch(one_row(EX1), [-1.0])


def test_integrated_coupling_is_linear_in_the_profile_integral_and_the_growth_factor():
    # MODEL.md section 4: I = (k_p^3/4) F(u) (nu/n) n_b0 int exp(-zeta^2/2 sigma_z^2)
    base = growth.integrated_coupling(2000.0, 1e-25, 1e18, 0.05, 0.8)
    assert base == pytest.approx(0.25 * 2000.0**3 * 1e-25 * 1e18 * 0.05 * 0.8, rel=1e-15)
    assert growth.integrated_coupling(2000.0, 1e-25, 1e18, 0.1, 0.4) == pytest.approx(base, rel=1e-15)


def test_text_codes_are_the_index_of_each_name_and_minus_one_for_anything_else():
    # the fast fixed-width path and the plain comparison give the same codes, for text of any width
    names = ["proton", "electron", "positron", "ion", "", "io", "ionx", "protons", "Proton", "muon", "positro"]
    expected = [SPECIES.index(v) if v in SPECIES else -1 for v in names]
    for width in ("<U8", "<U3", "<U12", "<U16", object):
        values = np.array([v for v in names if width is object or len(v) <= int(str(width)[2:])], dtype=width)
        want = [SPECIES.index(v) if v in SPECIES else -1 for v in values.tolist()]
        assert codes_of(values, SPECIES).tolist() == want, width
    assert codes_of(np.array(names), SPECIES).tolist() == expected


def test_the_reference_frequency_is_the_plasma_frequency_where_the_modulation_forms():
    # f_p ~ sqrt(n) (NRL Plasma Formulary), n(z) = n_0 (1 + g z): f_ref = f_p sqrt(1 + g z)
    assert competing.reference_frequency(180e9, 0.0, 3.0) == 180e9
    np.testing.assert_allclose(
        competing.reference_frequency(180e9, np.array([0.01, -0.05]), 2.0), 180e9 * np.sqrt([1.02, 0.9]), rtol=1e-15
    )
