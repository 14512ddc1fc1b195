"""Effects that compete with the self-modulation, and the measured-frequency check (MODEL.md section 6; SI in).

Every function works elementwise on arrays of shots as well as on one.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike
from scipy import constants as _c


def effective_offset(offset: ArrayLike, angle: ArrayLike, z: ArrayLike) -> np.ndarray:
    """x_eff = |offset| + |angle| z/2 [m]: mean centroid distance from the axis over z (MODEL.md 6, heuristic)."""
    return np.asarray(offset, dtype=float) + np.asarray(angle, dtype=float) * z / 2.0


def hosing_ratio(
    effective_offset: ArrayLike,
    sigma_r: ArrayLike,
    seed_density: ArrayLike,
    reference_density: ArrayLike,
    relative_noise: ArrayLike,
    efolds: ArrayLike,
    hosing_efolds_ratio: ArrayLike,
) -> np.ndarray:
    """(x_eff/sigma_r) / max(n_seed/n_ref, eta) exp(N_h - N): hosing over envelope seed (MODEL.md 6, heuristic)."""
    seed_level = np.maximum(np.asarray(seed_density, dtype=float) / reference_density, relative_noise)
    with np.errstate(over="ignore"):
        return (
            (np.asarray(effective_offset, dtype=float) / sigma_r)
            / seed_level
            * np.exp(np.asarray(efolds, dtype=float) * (np.asarray(hosing_efolds_ratio, dtype=float) - 1.0))
        )


def ion_motion_index(
    ion_charge: ArrayLike,
    ion_mass: ArrayLike,
    wakefield: ArrayLike,
    wavebreaking_field: ArrayLike,
    kp: ArrayLike,
    xi: ArrayLike,
) -> np.ndarray:
    """(Z_i m_e/M_i)(E_wake/E_0)(k_p xi)^2/2: ions move a skin depth over xi when >~ 1 (MODEL.md 6, estimate)."""
    kp_xi = np.asarray(kp, dtype=float) * xi
    return (
        (np.asarray(ion_charge, dtype=float) * _c.m_e / ion_mass)
        * (np.asarray(wakefield, dtype=float) / wavebreaking_field)
        * kp_xi
        * kp_xi
        / 2.0
    )


def divergence_ratio(z: ArrayLike, geometric_emittance: ArrayLike, sigma_r: ArrayLike) -> np.ndarray:
    """z / beta* = z eps_g / sigma_r^2, 0 for a cold beam (MODEL.md section 6; beam optics convention)."""
    sigma_r = np.asarray(sigma_r, dtype=float)
    return np.asarray(z, dtype=float) * geometric_emittance / (sigma_r * sigma_r)


def reference_frequency(plasma_frequency: ArrayLike, gradient: ArrayLike, z: ArrayLike) -> np.ndarray:
    """f_ref = f_p sqrt(1 + g z) [Hz]: the plasma frequency at z, where the modulation forms (MODEL.md section 6)."""
    return np.asarray(plasma_frequency, dtype=float) * np.sqrt(1.0 + np.asarray(gradient, dtype=float) * z)


def frequency_mismatch(measured_frequency: ArrayLike, reference_frequency: ArrayLike) -> np.ndarray:
    """f_meas/f_ref - 1: modulation at the local plasma frequency (MODEL.md 6; common practice, no source)."""
    return np.asarray(measured_frequency, dtype=float) / reference_frequency - 1.0


def implied_density(
    plasma_density: ArrayLike, measured_frequency: ArrayLike, reference_frequency: ArrayLike
) -> np.ndarray:
    """n_0 (f_meas/f_ref)^2 [unit of n_0]: the entrance density giving f_meas (MODEL.md 6; NRL Plasma Formulary)."""
    ratio = np.asarray(measured_frequency, dtype=float) / reference_frequency
    return np.asarray(plasma_density, dtype=float) * ratio * ratio


__all__ = [
    "divergence_ratio",
    "effective_offset",
    "frequency_mismatch",
    "hosing_ratio",
    "implied_density",
    "ion_motion_index",
    "reference_frequency",
]
