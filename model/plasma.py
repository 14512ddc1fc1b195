"""Derived plasma and beam quantities of MODEL.md section 2 (SI in, SI out).

Every function works elementwise on numpy arrays as well as on scalars.
Constants are CODATA values from scipy.constants.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c

from model.units import PER_CM3

ELECTRON_MASS = _c.m_e
ATOMIC_MASS = _c.physical_constants["atomic mass constant"][0]
ELEMENTARY_CHARGE = _c.e
VACUUM_PERMITTIVITY = _c.epsilon_0
SPEED_OF_LIGHT = _c.c

_OMEGA_P_SQ_PER_DENSITY = _c.e**2 / (_c.epsilon_0 * _c.m_e)


def plasma_density_m3(logged_density_cm3: ArrayLike, settings: Mapping[str, Any]) -> np.ndarray:
    """n_0 = density_scale x plasma.density_cm3 [1/m^3]: the logged density, calibrated (MODEL.md section 2)."""
    return np.asarray(logged_density_cm3, dtype=float) * (settings["density_scale"] * PER_CM3)


def plasma_angular_frequency(n_e_m3: ArrayLike) -> np.ndarray:
    """Electron plasma angular frequency omega_p = sqrt(n e^2 / (eps0 m_e)) [rad/s] (NRL Plasma Formulary)."""
    return np.sqrt(np.asarray(n_e_m3, dtype=float) * _OMEGA_P_SQ_PER_DENSITY)


def plasma_frequency(n_e_m3: ArrayLike) -> np.ndarray:
    """Plasma frequency f_p = omega_p / 2 pi [Hz] (NRL Plasma Formulary)."""
    return plasma_angular_frequency(n_e_m3) / (2.0 * np.pi)


def plasma_wavenumber(n_e_m3: ArrayLike) -> np.ndarray:
    """Plasma wavenumber k_p = omega_p / c [1/m] (Esarey, Schroeder, Leemans, RMP 81, 1229 (2009))."""
    return plasma_angular_frequency(n_e_m3) / SPEED_OF_LIGHT


def plasma_wavelength(n_e_m3: ArrayLike) -> np.ndarray:
    """Plasma wavelength lambda_p = 2 pi / k_p [m] (Esarey, Schroeder, Leemans, RMP 81, 1229 (2009))."""
    return 2.0 * np.pi / plasma_wavenumber(n_e_m3)


def skin_depth(n_e_m3: ArrayLike) -> np.ndarray:
    """Collisionless skin depth (electron inertial length) c / omega_p = 1 / k_p [m] (NRL Plasma Formulary)."""
    return 1.0 / plasma_wavenumber(n_e_m3)


def wavebreaking_field(n_e_m3: ArrayLike) -> np.ndarray:
    """Cold wave-breaking field E_0 = m_e c omega_p / e [V/m] (Esarey, Schroeder, Leemans, RMP 81, 1229 (2009))."""
    return ELECTRON_MASS * SPEED_OF_LIGHT * plasma_angular_frequency(n_e_m3) / ELEMENTARY_CHARGE


def lorentz_factor(momentum: ArrayLike, mass: ArrayLike) -> np.ndarray:
    """Lorentz factor gamma = sqrt(1 + (p / M c)^2) for momentum p [kg m/s], mass M [kg] (special relativity)."""
    beta_gamma = np.asarray(momentum, dtype=float) / (np.asarray(mass, dtype=float) * SPEED_OF_LIGHT)
    return np.sqrt(1.0 + beta_gamma * beta_gamma)


def peak_beam_density(population: ArrayLike, sigma_r: ArrayLike, sigma_z: ArrayLike) -> np.ndarray:
    """Peak density of a Gaussian bunch n_b0 = N_b / ((2 pi)^{3/2} sigma_r^2 sigma_z) [1/m^3] (normalisation)."""
    sigma_r = np.asarray(sigma_r, dtype=float)
    return np.asarray(population, dtype=float) / (
        (2.0 * np.pi) ** 1.5 * sigma_r * sigma_r * np.asarray(sigma_z, dtype=float)
    )


def line_density(zeta: ArrayLike, population: ArrayLike, sigma_z: ArrayLike) -> np.ndarray:
    """Line density lambda(zeta) = N_b / (sqrt(2 pi) sigma_z) exp(-zeta^2 / 2 sigma_z^2) [1/m] (Gaussian)."""
    zeta = np.asarray(zeta, dtype=float)
    sigma_z = np.asarray(sigma_z, dtype=float)
    x = zeta / sigma_z
    return np.asarray(population, dtype=float) / (np.sqrt(2.0 * np.pi) * sigma_z) * np.exp(-0.5 * x * x)


def geometric_emittance(normalised_emittance: ArrayLike, momentum: ArrayLike, mass: ArrayLike) -> np.ndarray:
    """Geometric rms emittance eps_g = eps_n / (beta gamma), beta gamma = p / M c [m rad] (beam optics convention)."""
    beta_gamma = np.asarray(momentum, dtype=float) / (np.asarray(mass, dtype=float) * SPEED_OF_LIGHT)
    return np.asarray(normalised_emittance, dtype=float) / beta_gamma


def waist_beta_function(sigma_r: ArrayLike, geometric_emittance_m: ArrayLike) -> np.ndarray:
    """Waist beta function beta* = sigma_r^2 / eps_g [m], infinite for eps_g = 0 (beam optics convention)."""
    sigma_r = np.asarray(sigma_r, dtype=float)
    eps = np.asarray(geometric_emittance_m, dtype=float)
    with np.errstate(divide="ignore"):
        return np.divide(sigma_r * sigma_r, eps)
