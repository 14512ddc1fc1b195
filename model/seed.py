"""Seed, noise and seed forces of MODEL.md section 3 (SI in, SI out; arrays of shots or one).

A seed either cuts the bunch (`ionization_front`) or is a short electron bunch ahead of
the driver in a preformed plasma (`electron_bunch`); either way it is described by the
cut density n_seed that would drive the same on-axis wake. Seed quantities are kept in
natural logarithms where a Gaussian tail can underflow (the electron bunch's longitudinal
form factor exp(-(k_p sigma_zs)^2/2)); an unseeded shot has ln n_seed = -inf.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c

from model.plasma import ATOMIC_MASS
from model.vocabulary import SPECIES, codes_of

# Per SPECIES code: mass [kg] and charge number; the ion's come from its own fields (NaN here).
_MASS_BY_SPECIES = np.array([_c.m_p, _c.m_e, _c.m_e, np.nan])
_CHARGE_BY_SPECIES = np.array([1.0, -1.0, 1.0, np.nan])
_ION = SPECIES.index("ion")


def driver_mass_and_charge(
    species: ArrayLike, mass_amu: ArrayLike, charge_state: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """Driver mass M [kg] and charge number Z of a species (name or SPECIES index) (MODEL.md section 2)."""
    species = np.asarray(species)
    code = species if species.dtype.kind in "iu" else codes_of(species, SPECIES)
    # the species' own values, then the ion rows' fields (fewer passes than np.where over every row)
    flat = np.asarray(code).reshape(-1)
    mass = _MASS_BY_SPECIES.take(flat, mode="clip")
    charge = _CHARGE_BY_SPECIES.take(flat, mode="clip")
    ion = np.flatnonzero(flat == _ION)
    if ion.size:
        mass[ion] = np.broadcast_to(np.asarray(mass_amu, dtype=float), np.shape(code)).reshape(-1)[ion] * ATOMIC_MASS
        charge[ion] = np.broadcast_to(np.asarray(charge_state, dtype=float), np.shape(code)).reshape(-1)[ion]
    return mass.reshape(np.shape(code)), charge.reshape(np.shape(code))


def cut_field_per_density(kp: ArrayLike, charge_number: ArrayLike, on_axis_factor: ArrayLike) -> np.ndarray:
    """E_seed/n_seed = (|Z| e/(eps0 k_p)) (k_p sigma_r)^2 R(a) [V m^2] of a cut (MODEL.md 3; Keinigs & Jones 1987)."""
    return np.abs(charge_number) * (_c.e / _c.epsilon_0) / np.asarray(kp, dtype=float) * on_axis_factor


def log_ionization_front_seed_density(
    peak_density: ArrayLike, seed_position: ArrayLike, sigma_z: ArrayLike
) -> np.ndarray:
    """ln n_seed, n_seed = n_b0 exp(-zeta_s^2 / 2 sigma_z^2): the density where the front cuts (MODEL.md section 3)."""
    x_s = np.asarray(seed_position, dtype=float) / np.asarray(sigma_z, dtype=float)
    return np.log(peak_density) - 0.5 * x_s * x_s


def log_electron_bunch_seed_field(
    charge: ArrayLike, sigma_z: ArrayLike, kp: ArrayLike, on_axis_factor: ArrayLike
) -> np.ndarray:
    """ln E_seed = ln[(Q k_p^2/(2 pi eps0)) e^{-(k_p sigma_zs)^2/2} R(a_s)] of a seed bunch (MODEL.md section 3)."""
    kp = np.asarray(kp, dtype=float)
    kp_sigma_z = kp * np.asarray(sigma_z, dtype=float)
    return (
        np.log(np.asarray(charge, dtype=float) * kp * kp * (1.0 / (2.0 * np.pi * _c.epsilon_0)) * on_axis_factor)
        - 0.5 * kp_sigma_z * kp_sigma_z
    )


def log_equivalent_cut_density(log_seed_field: ArrayLike, field_per_density: ArrayLike) -> np.ndarray:
    """ln n_seed, n_seed = n_0 (E_seed/E_0) / (|Z| (k_p sigma_r)^2 R(a)): the same-field cut (MODEL.md section 3)."""
    return np.asarray(log_seed_field, dtype=float) - np.log(field_per_density)


def gaussian_profile(zeta: ArrayLike, sigma_z: ArrayLike) -> np.ndarray:
    """exp(-zeta^2 / 2 sigma_z^2): a Gaussian bunch's densities at zeta relative to the centre (MODEL.md section 2)."""
    x = np.asarray(zeta, dtype=float) / np.asarray(sigma_z, dtype=float)
    return np.exp(-0.5 * x * x)


def slice_densities(
    peak_density: ArrayLike, population: ArrayLike, zeta: ArrayLike, sigma_z: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """(n(zeta) [1/m^3], lambda(zeta) [1/m]): local peak and line density of the slice at zeta (MODEL.md 2-3)."""
    sigma_z = np.asarray(sigma_z, dtype=float)
    profile = gaussian_profile(zeta, sigma_z)
    return np.asarray(peak_density, dtype=float) * profile, np.asarray(population, dtype=float) / (
        np.sqrt(2.0 * np.pi) * sigma_z
    ) * profile


def relative_noise(line_density_ref: ArrayLike, kp: ArrayLike, noise_floor: ArrayLike) -> np.ndarray:
    """eta = min(1, max(floor, (lambda/k_p)^{-1/2})): shot noise per skin depth (MODEL.md section 3, heuristic)."""
    with np.errstate(divide="ignore"):  # an empty slice: eta = 1
        shot_noise = np.sqrt(np.asarray(kp, dtype=float) / line_density_ref)
    return np.minimum(np.maximum(noise_floor, shot_noise), 1.0)


def log_seed_force_per_density(kp: ArrayLike, coupling_per_density: ArrayLike, seed_factor: ArrayLike) -> np.ndarray:
    """ln(s/n), s = (k_p^2/4) nu(n) H(u) [1/m^2] the seed force of a cut of local density n (MODEL.md section 3)."""
    kp = np.asarray(kp, dtype=float)
    return np.log(0.25 * kp * kp * coupling_per_density * seed_factor)


__all__ = [
    "cut_field_per_density",
    "driver_mass_and_charge",
    "gaussian_profile",
    "log_electron_bunch_seed_field",
    "log_equivalent_cut_density",
    "log_ionization_front_seed_density",
    "log_seed_force_per_density",
    "relative_noise",
    "slice_densities",
]
