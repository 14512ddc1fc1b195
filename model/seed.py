"""Seed, noise and seed force of MODEL.md section 3 (SI in, SI out; arrays of shots or one).

A seed either cuts the bunch (`ionization_front`) or is a short electron bunch ahead of
the driver in a preformed plasma (`electron_bunch`); either way it is described by the
cut density n_seed that would drive the same wake. Seed quantities are kept in natural
logarithms where a Gaussian tail can underflow (the electron bunch's longitudinal form
factor exp(-(k_p sigma_zs)^2/2)); an unseeded shot has ln n_seed = -inf.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c

from model import form_factors as ff
from model.plasma import ATOMIC_MASS


def driver_mass_and_charge(
    species: ArrayLike, mass_amu: ArrayLike, charge_state: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """Driver mass M [kg] and charge number Z: proton (m_p, +1), electron (m_e, -1), positron (m_e, +1), ion (mass_amu u, charge_state) (MODEL.md section 2)."""
    species = np.asarray(species)
    electron_like = (species == "electron") | (species == "positron")
    ion = species == "ion"
    mass = np.where(electron_like, _c.m_e, _c.m_p)
    mass = np.where(ion, np.asarray(mass_amu, dtype=float) * ATOMIC_MASS, mass)
    charge = np.where(species == "electron", -1.0, 1.0)
    charge = np.where(ion, np.asarray(charge_state, dtype=float), charge)
    return mass, charge


def cut_field_per_density(
    kp: ArrayLike, sigma_r: ArrayLike, charge_number: ArrayLike, on_axis_factor: ArrayLike
) -> np.ndarray:
    """E_seed / n_seed of a bunch cut, (|Z| e / (eps0 k_p)) (k_p sigma_r)^2 R(a) [V m^2], R(a) the driver slice's on-axis factor (MODEL.md section 3; Keinigs & Jones, Phys. Fluids 30, 252 (1987) kernel)."""
    kp = np.asarray(kp, dtype=float)
    kp_sigma_r = kp * np.asarray(sigma_r, dtype=float)
    u = kp_sigma_r * kp_sigma_r
    return np.abs(charge_number) * _c.e / (_c.epsilon_0 * kp) * u * on_axis_factor


def log_ionization_front_seed_density(
    peak_density: ArrayLike, seed_position: ArrayLike, sigma_z: ArrayLike
) -> np.ndarray:
    """ln n_seed, n_seed = n_b0 exp(-zeta_s^2 / 2 sigma_z^2): the driver's local peak density where the front cuts it (MODEL.md section 3)."""
    x_s = np.asarray(seed_position, dtype=float) / np.asarray(sigma_z, dtype=float)
    return np.log(peak_density) - 0.5 * x_s * x_s


def log_electron_bunch_seed_field(
    charge: ArrayLike, sigma_z: ArrayLike, sigma_r: ArrayLike, kp: ArrayLike
) -> np.ndarray:
    """ln E_seed, E_seed = (Q k_p^2 / (2 pi eps0)) exp(-(k_p sigma_zs)^2/2) R((k_p sigma_rs)^2/2) [V/m] of a seed electron bunch of charge Q [C] (MODEL.md section 3; Keinigs & Jones, Phys. Fluids 30, 252 (1987) kernel)."""
    kp = np.asarray(kp, dtype=float)
    return (
        np.log(np.asarray(charge, dtype=float) * kp * kp / (2.0 * np.pi * _c.epsilon_0))
        - 0.5 * (kp * np.asarray(sigma_z, dtype=float)) ** 2
        + np.log(ff.gaussian_on_axis_factor(0.5 * (kp * np.asarray(sigma_r, dtype=float)) ** 2))
    )


def log_equivalent_cut_density(log_seed_field: ArrayLike, field_per_density: ArrayLike) -> np.ndarray:
    """ln n_seed of the cut that gives the same E_seed, n_seed = n_0 (E_seed/E_0) / (|Z| (k_p sigma_r)^2 R(a)) = E_seed / cut_field_per_density (MODEL.md section 3)."""
    return np.asarray(log_seed_field, dtype=float) - np.log(field_per_density)


def slice_densities(
    peak_density: ArrayLike, population: ArrayLike, zeta: ArrayLike, sigma_z: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """(n(zeta), lambda(zeta)) of the slice at zeta: local peak density n_b0 e^{-zeta^2/2 sigma_z^2} [1/m^3] and line density N_b/(sqrt(2 pi) sigma_z) e^{-zeta^2/2 sigma_z^2} [1/m] (MODEL.md sections 2-3, Gaussian bunch)."""
    sigma_z = np.asarray(sigma_z, dtype=float)
    x = np.asarray(zeta, dtype=float) / sigma_z
    profile = np.exp(-0.5 * x * x)
    return np.asarray(peak_density, dtype=float) * profile, np.asarray(population, dtype=float) / (
        np.sqrt(2.0 * np.pi) * sigma_z
    ) * profile


def relative_noise(line_density_ref: ArrayLike, kp: ArrayLike, noise_floor: ArrayLike) -> np.ndarray:
    """Relative noise eta = max(noise_floor, (lambda(zeta_ref)/k_p)^{-1/2}): shot noise of the particles in one skin depth, floored (MODEL.md section 3, project heuristic)."""
    return np.maximum(noise_floor, 1.0 / np.sqrt(np.asarray(line_density_ref, dtype=float) / kp))


def seed_to_noise_efolds(log_seed_density: ArrayLike, noise_density: ArrayLike) -> np.ndarray:
    """ln(s_seed / s_noise) = ln(n_seed / (eta n_ref)), noise_density = eta n_ref (MODEL.md section 3)."""
    return np.asarray(log_seed_density, dtype=float) - np.log(noise_density)


def log_seed_force(
    log_seed_density: ArrayLike,
    noise_density: ArrayLike,
    kp: ArrayLike,
    coupling_per_density: ArrayLike,
    seed_factor: ArrayLike,
) -> np.ndarray:
    """ln s, s = max(s_seed, s_noise) = (k_p^2/4) (nu(n)/n) H(u) max(n_seed, eta n_ref) [1/m^2] (MODEL.md section 3)."""
    kp = np.asarray(kp, dtype=float)
    return np.log(0.25 * kp * kp * coupling_per_density * seed_factor) + np.maximum(
        log_seed_density, np.log(noise_density)
    )


__all__ = [
    "cut_field_per_density",
    "driver_mass_and_charge",
    "log_electron_bunch_seed_field",
    "log_equivalent_cut_density",
    "log_ionization_front_seed_density",
    "log_seed_force",
    "relative_noise",
    "seed_to_noise_efolds",
    "slice_densities",
]
