"""Sensitivities by central differences (model.sensitivity) against the closed forms the model has, NaN where no
derivative exists, one-sided at range edges, and the expected phase jitter from every logged jitter source."""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from model import (
    INPUT_FIELDS,
    PHASE_JITTER_SOURCES,
    evaluate_shot,
    log_sensitivities,
    phase_jitter_budget,
    wake_phase_derivatives,
)
from model.sensitivity import SIGNED_OUTPUTS

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
EX1 = CASES[0]["input"]


def columns_of(shots):
    """Dotted-path columns of shots in the API JSON shape (absent = NaN / None)."""
    cols = {}
    for f in INPUT_FIELDS:
        section, name = f.path.split(".", 1)
        values = [shot.get(section, {}).get(name) for shot in shots]
        if f.kind == "enum":
            cols[f.path] = np.array([v if v is not None else "" for v in values], dtype=object)
        else:
            cols[f.path] = np.array([math.nan if v is None else v for v in values], dtype=float)
    return cols


def invented_shots(n=40, seed=3):
    """Invented proton shots over the three seed methods, saturated or not (demo data, no real machine)."""
    rng = np.random.default_rng(seed)
    shots = []
    for i in range(n):
        sigma_z = float(rng.uniform(20, 120))
        method = ["ionization_front", "electron_bunch", "none"][i % 3]
        seed_block = {"method": method}
        if method != "none":
            seed_block["position_mm"] = float(rng.uniform(-0.5, 1.5) * sigma_z)
        if method == "electron_bunch":
            seed_block |= {
                "electron_charge_pc": float(rng.uniform(50, 500)),
                "electron_sigma_z_mm": 0.3,
                "electron_sigma_r_mm": 0.2,
            }
        shots.append(
            {
                "driver": {
                    "species": "proton",
                    "momentum_gev": float(rng.uniform(50, 450)),
                    "population": float(10 ** rng.uniform(10.5, 11.7)),
                    "sigma_z_mm": sigma_z,
                    "sigma_r_mm": float(rng.uniform(0.1, 0.4)),
                    "emittance_n_mm_mrad": float(rng.uniform(1, 4)),
                    "offset_x_mm": 0.02,
                },
                "plasma": {
                    "density_cm3": float(10 ** rng.uniform(14, 15.3)),
                    "length_m": float(rng.uniform(2, 12)),
                    "gradient_pct_per_m": float(rng.normal(0, 0.3)),
                    "ion_mass_amu": 39.948,
                },
                "seed": seed_block,
            }
        )
    return shots


SHOTS = invented_shots()


def sens(shots, fields, outputs, settings=None, **kw):
    return log_sensitivities(columns_of(shots), fields, outputs, settings, **kw)


# Closed-form exponents q ~ x^p of MODEL.md sections 2-5, each with its published source.
CLOSED_FORMS = [
    # NRL Plasma Formulary: f_pe = 8.98 kHz sqrt(n_e) -> d ln f_p / d ln n = 1/2
    ("plasma_frequency_ghz", "plasma.density_cm3", 0.5),
    # Esarey, Schroeder, Leemans, RMP 81, 1229 (2009): lambda_p ~ 3.3e10/sqrt(n) um, E_0 ~ 96 sqrt(n) V/m
    ("plasma_wavelength_mm", "plasma.density_cm3", -0.5),
    ("wavebreaking_field_gv_m", "plasma.density_cm3", 0.5),
    # MODEL.md section 2 with k_p ~ sqrt(n) (NRL): k_p sigma_r and sigma_z/lambda_p
    ("kp_sigma_r", "plasma.density_cm3", 0.5),
    ("kp_sigma_r", "driver.sigma_r_mm", 1.0),
    ("bunch_length_over_plasma_wavelength", "driver.sigma_z_mm", 1.0),
    ("bunch_length_over_plasma_wavelength", "plasma.density_cm3", 0.5),
    # MODEL.md section 2: Gaussian bunch n_b0 = N_b / ((2 pi)^{3/2} sigma_r^2 sigma_z)
    ("peak_beam_density_cm3", "driver.population", 1.0),
    ("peak_beam_density_cm3", "driver.sigma_r_mm", -2.0),
    ("peak_beam_density_cm3", "driver.sigma_z_mm", -1.0),
    # MODEL.md section 5: density tolerance 100 * 2 dpsi/(k_p xi_ref), xi_ref = r_ref sigma_z, k_p ~ sqrt(n) (NRL)
    ("density_tolerance_pct", "plasma.density_cm3", -0.5),
    ("density_tolerance_pct", "driver.sigma_z_mm", -1.0),
    ("density_tolerance_pct", "driver.population", 0.0),
    ("phase_per_pct_density_rad", "plasma.density_cm3", 0.5),
    ("phase_per_pct_density_rad", "driver.sigma_z_mm", 1.0),
    # Kumar, Pukhov, Lotov, PRL 104, 255003 (2010); Schroeder et al., PRL 107, 145002 (2011): N ~ (nu xi z^2)^{1/3},
    # nu ~ n_b ~ N_b, so N(L) ~ N_b^{1/3} and L^{2/3}
    ("efolds_exit", "driver.population", 1.0 / 3.0),
    ("efolds_exit", "plasma.length_m", 2.0 / 3.0),
    # epsilon_g = epsilon_n/(beta gamma), beta gamma = p/(M c) (MODEL.md section 2, relativistic kinematics)
    ("geometric_emittance_nm", "driver.momentum_gev", -1.0),
    ("geometric_emittance_nm", "driver.emittance_n_mm_mrad", 1.0),
]


def test_log_derivatives_of_many_shots_match_the_closed_form_exponents_of_the_model():
    fields = sorted({f for _, f, _ in CLOSED_FORMS})
    outputs = sorted({q for q, _, _ in CLOSED_FORMS})
    s = sens(SHOTS, fields, outputs)
    assert s.fields == tuple(fields) and s.outputs == tuple(outputs)
    for q, field, exponent in CLOSED_FORMS:
        values = s.values[q][:, fields.index(field)]
        assert s.logarithmic[q]
        np.testing.assert_allclose(values, exponent, atol=2e-6, err_msg=f"d ln {q} / d ln {field}")


def test_efolds_fall_with_momentum_as_the_coupling_one_over_gamma():
    # Kumar, Pukhov, Lotov, PRL 104, 255003 (2010): N ~ nu^{1/3}, nu ~ 1/gamma (MODEL.md section 2);
    # d ln gamma / d ln p = beta^2, so d ln N / d ln p = -beta^2/3 (relativistic kinematics)
    s = sens(SHOTS, ["driver.momentum_gev"], ["efolds_exit", "lorentz_gamma"])
    gamma = np.array([evaluate_shot(shot)["lorentz_gamma"] for shot in SHOTS])
    beta2 = 1.0 - 1.0 / gamma**2
    np.testing.assert_allclose(s.values["efolds_exit"][:, 0], -beta2 / 3.0, rtol=1e-5)
    np.testing.assert_allclose(s.values["lorentz_gamma"][:, 0], beta2, rtol=1e-5)


def test_many_shots_at_once_give_the_same_derivatives_as_each_shot_alone():
    fields = ["plasma.density_cm3", "driver.sigma_r_mm", "plasma.length_m"]
    outputs = ["efolds_exit", "wakefield_estimate_mv_m", "gradient_phase_error_rad"]
    together = sens(SHOTS[:6], fields, outputs)
    for i, shot in enumerate(SHOTS[:6]):
        alone = sens([shot], fields, outputs)
        for q in outputs:
            np.testing.assert_array_equal(together.values[q][i], alone.values[q][0])


def shot_noise_regime():
    """ex-1 with no noise floor, so the relative noise is the shot noise per skin depth (MODEL.md section 3)."""
    return {"noise_floor": 0.0}


def test_seed_over_noise_grows_by_half_an_e_fold_per_e_fold_of_population_in_the_shot_noise_regime():
    # MODEL.md section 3: seed_to_noise = ln(n_seed/(n_ref eta)), eta = (lambda/k_p)^{-1/2} (Poisson statistics of the
    # particles per skin depth: relative fluctuation ~ count^{-1/2}, common practice, no source), lambda ~ N_b and
    # k_p ~ sqrt(n) (NRL Plasma Formulary): d/d ln N_b = +1/2, d/d ln n = -1/4; a signed output: dq/d ln x
    front = [s for s in SHOTS if s["seed"]["method"] == "ionization_front"]
    s = sens(front, ["driver.population", "plasma.density_cm3"], ["seed_to_noise_efolds"], shot_noise_regime())
    assert "seed_to_noise_efolds" in SIGNED_OUTPUTS and not s.logarithmic["seed_to_noise_efolds"]
    np.testing.assert_allclose(s.values["seed_to_noise_efolds"][:, 0], 0.5, atol=1e-6)
    np.testing.assert_allclose(s.values["seed_to_noise_efolds"][:, 1], -0.25, atol=1e-6)


def relative_shot_noise(shot, settings_r_ref=1.0):
    """(lambda(zeta_ref)/k_p)^{-1/2} of MODEL.md section 3, from scipy.constants (CODATA)."""
    n0 = shot["plasma"]["density_cm3"] * 1e6
    kp = math.sqrt(n0 * constants.e**2 / (constants.epsilon_0 * constants.m_e)) / constants.c
    sigma_z = shot["driver"]["sigma_z_mm"] * 1e-3
    zeta_ref = shot["seed"]["position_mm"] * 1e-3 - settings_r_ref * sigma_z
    line = (
        shot["driver"]["population"] / (math.sqrt(2 * math.pi) * sigma_z) * math.exp(-(zeta_ref**2) / (2 * sigma_z**2))
    )
    return (line / kp) ** -0.5


def test_a_step_across_the_noise_floor_is_a_regime_boundary_and_gives_no_derivative():
    shot = copy.deepcopy(EX1)
    floor = relative_shot_noise(shot)  # put the noise floor exactly at the shot noise of this shot
    s = sens(
        [shot],
        ["driver.population", "plasma.length_m"],
        ["seed_to_noise_efolds", "efolds_exit"],
        {"noise_floor": floor},
    )
    assert math.isnan(s.values["seed_to_noise_efolds"][0, 0])  # slope 1/2 below, 0 above: a kink
    assert s.values["efolds_exit"][0, 0] == pytest.approx(1 / 3, abs=1e-6)  # smooth there: still a derivative
    assert s.values["seed_to_noise_efolds"][0, 1] == pytest.approx(0.0, abs=1e-6)


def test_a_step_across_the_saturation_point_gives_no_derivative_where_the_output_is_null_or_kinks():
    # MODEL.md section 4: z_ref = z_sat when saturated, else L; with L = z_sat a step in L crosses the point
    z_sat = evaluate_shot(EX1)["saturation_length_m"]
    shot = copy.deepcopy(EX1)
    shot["plasma"]["length_m"] = z_sat
    s = sens([shot], ["plasma.length_m"], ["saturation_length_m", "phase_slip_rad", "efolds_exit"])
    assert math.isnan(s.values["saturation_length_m"][0, 0])  # null on the short side
    assert math.isnan(s.values["phase_slip_rad"][0, 0])  # N(z_ref) ~ L^{2/3} below, constant above
    assert s.values["efolds_exit"][0, 0] == pytest.approx(2 / 3, abs=1e-6)  # N(L) ~ L^{2/3} on both sides


def test_at_the_edge_of_the_valid_range_the_difference_is_one_sided_from_the_valid_side():
    at_max = copy.deepcopy(EX1)
    at_max["driver"]["population"] = 1e14  # the top of its valid range (MODEL.md section 1)
    bound = copy.deepcopy(EX1)
    bound["seed"]["position_mm"] = 10 * bound["driver"]["sigma_z_mm"]  # |zeta_s| = 10 sigma_z: sigma_z may not shrink
    s = sens(
        [at_max, bound], ["driver.population", "driver.sigma_z_mm"], ["peak_beam_density_cm3", "density_tolerance_pct"]
    )
    assert s.one_sided.tolist() == [[True, False], [False, True]]
    # a power law has exact one-sided log differences (MODEL.md sections 2 and 5)
    assert s.values["peak_beam_density_cm3"][0, 0] == pytest.approx(1.0, abs=1e-9)
    assert s.values["density_tolerance_pct"][1, 1] == pytest.approx(-1.0, abs=1e-9)


def test_no_derivative_for_zero_outputs_zero_inputs_absent_inputs_and_integer_fields():
    centred = copy.deepcopy(EX1)
    centred["driver"]["offset_x_mm"] = 0.0  # hosing ratio of a centred beam: 0, no logarithm
    ion = copy.deepcopy(EX1)
    ion["driver"] |= {"species": "ion", "mass_amu": 207.2, "charge_state": 30}
    s = sens(
        [centred, ion],
        ["driver.offset_x_mm", "driver.charge_state", "plasma.density_cm3"],
        ["hosing_ratio", "plasma_frequency_ghz"],
    )
    assert math.isnan(s.values["hosing_ratio"][0, 2])
    assert math.isnan(s.values["plasma_frequency_ghz"][0, 0])  # x = 0: no log step
    assert s.values["plasma_frequency_ghz"][1, 0] == pytest.approx(0.0, abs=1e-9)  # the ion is 0.02 mm off axis
    assert np.isnan(s.values["plasma_frequency_ghz"][:, 1]).all()  # absent for the proton, an integer for the ion
    assert s.values["plasma_frequency_ghz"][:, 2] == pytest.approx([0.5, 0.5], abs=1e-6)


def test_unknown_fields_or_outputs_are_refused():
    with pytest.raises(ValueError, match="driver.colour"):
        sens([EX1], ["driver.colour"], ["efolds_exit"])
    with pytest.raises(ValueError, match="efolds_total"):
        sens([EX1], ["plasma.length_m"], ["efolds_total"])


# The phase-jitter budget (issue 10 item 7): psi = k_p xi_ref - N(z_ref)/sqrt(3) (MODEL.md section 5).


def unsaturated(shot):
    s = copy.deepcopy(shot)
    s["plasma"]["length_m"] = 0.5 * evaluate_shot(shot)["saturation_length_m"]
    return s


def test_phase_derivative_in_population_is_minus_a_third_of_the_slip_when_not_saturated():
    # Unsaturated, z_ref = L: k_p xi_ref does not depend on N_b and N(L) ~ N_b^{1/3} (Schroeder et al.,
    # PRL 107, 145002 (2011); MODEL.md sections 4-5), so d psi / d ln N_b = -N(L)/(3 sqrt 3) = -phase_slip/3
    shots = [unsaturated(EX1), unsaturated(SHOTS[0]), unsaturated(SHOTS[3])]
    slip = np.array([evaluate_shot(s)["phase_slip_rad"] for s in shots])
    d = wake_phase_derivatives(columns_of(shots))
    assert set(d) == set(PHASE_JITTER_SOURCES)
    np.testing.assert_allclose(d["driver.population"], -slip / 3.0, rtol=1e-6)


def test_phase_derivative_is_the_plasma_phase_minus_the_slip_part():
    # d psi/d ln x = 200 d(phase_per_pct)/d ln x - d(phase_slip)/d ln x; with k_p ~ sqrt(n) (NRL Plasma Formulary)
    # d(k_p xi)/d ln n = k_p xi / 2 and d(k_p xi)/d ln sigma_z = k_p xi (MODEL.md section 5)
    cols = columns_of(SHOTS[:9])
    d = wake_phase_derivatives(cols)
    slip = log_sensitivities(cols, PHASE_JITTER_SOURCES, ["phase_slip_rad"], signed=["phase_slip_rad"])
    kp_xi = 200.0 * np.array([evaluate_shot(s)["phase_per_pct_density_rad"] for s in SHOTS[:9]])
    expected_plasma_part = {
        "plasma.density_cm3": kp_xi / 2,
        "driver.population": 0 * kp_xi,
        "driver.sigma_z_mm": kp_xi,
        "driver.sigma_r_mm": 0 * kp_xi,
    }
    for j, path in enumerate(PHASE_JITTER_SOURCES):
        np.testing.assert_allclose(
            d[path] + slip.values["phase_slip_rad"][:, j], expected_plasma_part[path], rtol=1e-6, atol=1e-6
        )


def test_the_expected_jitter_is_the_root_sum_square_of_its_parts():
    derivatives = {
        "plasma.density_cm3": np.array([120.0, -80.0]),
        "driver.population": np.array([-1.5, -2.0]),
        "driver.sigma_z_mm": np.array([250.0, 300.0]),
        "driver.sigma_r_mm": np.array([0.4, 0.1]),
    }
    spreads = {
        "plasma.density_cm3": 0.001,
        "driver.population": 0.03,
        "driver.sigma_z_mm": 0.002,
        "driver.sigma_r_mm": 0.01,
    }
    budget = phase_jitter_budget(derivatives, spreads)
    for path in spreads:
        np.testing.assert_allclose(budget.by_source_rad[path], np.abs(derivatives[path]) * spreads[path])
    expected = np.sqrt(sum((derivatives[p] * spreads[p]) ** 2 for p in spreads))
    np.testing.assert_allclose(budget.expected_rad, expected, rtol=1e-15)


def test_density_only_jitter_is_the_density_derivative_times_the_density_spread():
    d = wake_phase_derivatives(columns_of([EX1]))
    budget = phase_jitter_budget(d, {"plasma.density_cm3": 0.002})
    assert float(budget.expected_rad[0]) == pytest.approx(abs(float(d["plasma.density_cm3"][0])) * 0.002, rel=1e-15)
    with_zero = phase_jitter_budget(
        d, {"plasma.density_cm3": 0.002, "driver.population": 0.0, "driver.sigma_z_mm": 0.0, "driver.sigma_r_mm": 0.0}
    )
    assert float(with_zero.expected_rad[0]) == float(budget.expected_rad[0])
    assert float(with_zero.by_source_rad["driver.population"][0]) == 0.0


def test_a_source_with_zero_spread_contributes_zero_even_without_a_derivative_and_unknown_spreads_are_unknown():
    budget = phase_jitter_budget(
        {"plasma.density_cm3": 100.0, "driver.population": math.nan},
        {"plasma.density_cm3": 0.001, "driver.population": 0.0},
    )
    assert float(budget.by_source_rad["driver.population"]) == 0.0
    assert float(budget.expected_rad) == pytest.approx(0.1, rel=1e-15)
    unknown = phase_jitter_budget(
        {"plasma.density_cm3": 100.0, "driver.population": -1.0},
        {"plasma.density_cm3": 0.001, "driver.population": None},
    )
    assert math.isnan(float(unknown.expected_rad))
    with pytest.raises(ValueError, match="driver.sigma_r_mm"):
        phase_jitter_budget({"plasma.density_cm3": 1.0}, {"driver.sigma_r_mm": 0.01})
    with pytest.raises(ValueError, match=">= 0"):
        phase_jitter_budget({"plasma.density_cm3": 1.0}, {"plasma.density_cm3": -0.01})
