"""Plasma and beam quantities of MODEL.md section 2 against published formulae and plasmapy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from model import evaluate_shot
from model.plasma import (
    lorentz_factor,
    plasma_angular_frequency,
    plasma_frequency,
    plasma_wavelength,
    plasma_wavenumber,
    skin_depth,
    wavebreaking_field,
)

DENSITIES_CM3 = np.array([1e10, 1e14, 7e14, 1e17, 1e20])
DENSITIES_M3 = DENSITIES_CM3 * 1e6


def test_plasma_frequency_matches_nrl_plasma_formulary_8_98_khz_root_n():
    # NRL Plasma Formulary: f_pe = 8.98e3 sqrt(n_e[cm^-3]) Hz (3 significant figures)
    np.testing.assert_allclose(plasma_frequency(DENSITIES_M3), 8.98e3 * np.sqrt(DENSITIES_CM3), rtol=1e-3)


def test_plasma_angular_frequency_matches_nrl_plasma_formulary_5_64e4_root_n():
    # NRL Plasma Formulary: omega_pe = 5.64e4 sqrt(n_e[cm^-3]) rad/s (3 significant figures)
    np.testing.assert_allclose(plasma_angular_frequency(DENSITIES_M3), 5.64e4 * np.sqrt(DENSITIES_CM3), rtol=1e-3)


def test_wavebreaking_field_matches_esarey_schroeder_leemans_96_root_n():
    # Esarey, Schroeder, Leemans, Rev. Mod. Phys. 81, 1229 (2009): E_0 = 96 sqrt(n_0[cm^-3]) V/m (2 figures)
    np.testing.assert_allclose(wavebreaking_field(DENSITIES_M3), 96.0 * np.sqrt(DENSITIES_CM3), rtol=5e-3)


def test_plasma_wavelength_matches_esarey_schroeder_leemans_3_3e10_over_root_n_microns():
    # Esarey, Schroeder, Leemans, Rev. Mod. Phys. 81, 1229 (2009): lambda_p = 3.3e10/sqrt(n_0[cm^-3]) um (2 figures)
    np.testing.assert_allclose(plasma_wavelength(DENSITIES_M3) / 1e-6, 3.3e10 / np.sqrt(DENSITIES_CM3), rtol=1.6e-2)


def test_plasma_frequency_and_inertial_length_match_plasmapy_formulary():
    # plasmapy.formulary (plasma_frequency in rad/s, inertial_length in m), to 1e-6
    astropy_units = pytest.importorskip("astropy.units")
    formulary = pytest.importorskip("plasmapy.formulary")
    n = DENSITIES_M3 * astropy_units.m**-3
    omega = formulary.plasma_frequency(n, "e-").to_value(astropy_units.rad / astropy_units.s)
    length = formulary.inertial_length(n, "e-").to_value(astropy_units.m)
    np.testing.assert_allclose(plasma_angular_frequency(DENSITIES_M3), omega, rtol=1e-6)
    np.testing.assert_allclose(skin_depth(DENSITIES_M3), length, rtol=1e-6)


def test_derived_quantities_hang_together():
    n = DENSITIES_M3
    np.testing.assert_allclose(plasma_wavenumber(n) * skin_depth(n), 1.0, rtol=1e-15)
    np.testing.assert_allclose(plasma_wavelength(n), 2 * np.pi * skin_depth(n), rtol=1e-15)
    np.testing.assert_allclose(plasma_frequency(n) * plasma_wavelength(n), constants.c, rtol=1e-15)


def test_lorentz_factor_of_a_proton_at_rest_and_at_high_momentum():
    # special relativity; 400 GeV/c proton: gamma = sqrt(1 + (p/m_p c)^2)
    p = 400e9 * constants.e / constants.c
    assert lorentz_factor(0.0, constants.m_p) == 1.0
    expected = math.hypot(1.0, 400e9 * constants.e / (constants.m_p * constants.c**2))
    assert lorentz_factor(p, constants.m_p) == pytest.approx(expected, rel=1e-15)


def test_proton_is_about_1836_electron_masses():
    # common practice, no source: protons are 1836 electron masses (scipy.constants, CODATA)
    assert constants.m_p / constants.m_e == pytest.approx(1836.15, abs=0.01)


def test_a_bunch_of_several_cm_is_many_plasma_wavelengths_long_at_1e14_to_1e15():
    # common practice, no source: a bunch of several cm is many lambda_p long at 1e14-1e15 cm^-3
    for n_cm3 in (1e14, 1e15):
        assert 0.05 / plasma_wavelength(n_cm3 * 1e6) > 10


def test_microbunch_spacing_is_the_plasma_wavelength_so_modulation_frequency_is_plasma_frequency():
    # common practice, no source: micro-bunches are spaced by lambda_p, so f_mod = c/lambda_p = f_p;
    # measuring exactly f_p gives no mismatch and the set density back.
    shot = {
        "driver": {"species": "proton", "momentum_gev": 400, "population": 3e11, "sigma_z_mm": 80, "sigma_r_mm": 0.2},
        "plasma": {"density_cm3": 7e14, "length_m": 10, "ion_mass_amu": 85.47},
        "seed": {"method": "ionization_front", "position_mm": 0},
    }
    f_p_ghz = constants.c / plasma_wavelength(7e14 * 1e6) / 1e9
    shot["measured"] = {"modulation_freq_ghz": f_p_ghz}
    result = evaluate_shot(shot)
    assert result["plasma_frequency_ghz"] == pytest.approx(f_p_ghz, rel=1e-14)
    assert abs(result["frequency_mismatch_pct"]) < 1e-10
    assert result["implied_density_cm3"] == pytest.approx(7e14, rel=1e-12)
