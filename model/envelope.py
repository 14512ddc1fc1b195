"""Detailed envelope solver for beam self-modulation (MODEL.md section 10).

Each slice zeta_i of the driver carries an rms radius sigma_i(z) obeying
    sigma_i'' = eps_g^2 / sigma_i^3 + K_i,
    K_i = -(Z^2 e^2 k_p^3 sigma_i / (8 pi eps0 gamma M c^2))
          sum_{j ahead of i} sin(k_p(zeta_j - zeta_i)) lambda_j h((u_i+u_j)/2) dzeta,
with u = k_p^2 sigma^2 and h(u) = 1/u - e^u E1(u) = int_0^inf e^{-ut} t/(1+t) dt.

Numerics (choices documented in the module and in the result's `numerics`):
- h((u_i+u_j)/2) = sum_m w_m e^{-u_i t_m/2} e^{-u_j t_m/2} (model.quadrature) and
  sin(a-b) = sin a cos b - cos a sin b make the double sum a few exclusive cumulative sums
  over the slices ahead: O(slices x nodes) per step.
- sigma'' = eps^2/sigma^3 + K is the radial equation of a point in a plane with angular
  momentum eps_g under the central force K. The solver advances that point (x, y) with
  velocity Verlet (kick-drift-kick, symplectic); sigma = sqrt(x^2 + y^2). This is the same
  equation without the stiff 1/sigma^3 term: a drift is exact, so a beam without charge
  follows sigma* sqrt(1 + (z/beta*)^2) to rounding, and a pinching slice cannot step
  through sigma = 0.
- Seeds: `ionization_front` cuts the bunch (the slice grid starts at zeta_s, nothing ahead
  sees plasma); `electron_bunch` adds a rigid slice of charge -Q at zeta_s with its own
  rms radius and the longitudinal form factor exp(-(k_p sigma_zs)^2/2) (the same one as in
  section 3's E_seed), in a preformed plasma (the grid starts at +5 sigma_z, where the
  Gaussian's truncation is a cut of 4e-6 of its peak, far below the noise floor).
- Noise (`none`, or whenever section 3's noise force beats the seed force): a rigid thin
  slice of eta lambda(zeta_ref)/k_p particles of the driver species at the grid head. A cut
  of line density lambda_c and a thin slice of lambda_c/k_p particles drive the same
  modulated force amplitude, so this is exactly section 3's noise force s_noise = (k_p^2/4)
  nu(n_ref) H(u) eta at every slice behind it: deterministic, consistent with the closed form.
- The electron seed's force on a driver slice is h((u_i+u_s)/2), u_s = (k_p sigma_rs)^2, as
  section 10 writes it. Section 3's closed form instead matches the seed's on-axis field with
  an equivalent cut, R(a_s)/R(a); the solver's seed force is therefore
  rho = [h((u+u_s)/2)/h(u)] / [R(a_s)/R(a)] times the closed form's (0.84 for ex-2, 1.06 for
  ex-5: ln rho = -0.18 and +0.06 e-folds). `seed_force_ratio` gives rho; tests/model checks that
  the solver's first modulation is rho times the closed form's.
- Step. The default dz is the smallest of L/200, 1/25 of the closed form's e-fold length at
  z_ref, beta*/20 and 0.08 rad of betatron phase in the focusing the closed form expects (its
  saturated wake, or the cut's own). The focusing of the bunch train near saturation is stronger
  than that estimate: while delta < delta_sat/10 a step advances at most 0.03 rad of betatron
  phase on the worked examples, on the way to saturation up to 0.32 rad (ex-1; velocity Verlet's
  phase error is (k dz)^2/24 per step, 0.4 %). The run reports both (numerics), and halving dz
  changes delta by under 1 % up to the saturation point (tests/model/test_envelope.py).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from model import quadrature
from model.evaluate import evaluate_shot, growth_along_plasma
from model.form_factors import gaussian_on_axis_factor, wake_kernel_h
from model.growth import log_series_magnitude
from model.inputs import clean_shot_columns, validate_shot
from model.plasma import (
    ELEMENTARY_CHARGE,
    SPEED_OF_LIGHT,
    VACUUM_PERMITTIVITY,
    geometric_emittance,
    line_density,
    lorentz_factor,
    plasma_density_m3,
    plasma_wavenumber,
)
from model.rules import resolve_settings
from model.seed import driver_mass_and_charge, relative_noise
from model.units import GEV_PER_C, MM, MM_MRAD, MV_PER_M, PC, PCT
from model.vocabulary import SEEDED_METHODS

GRID_HEAD_SIGMA_Z = 5.0  # head of the slice grid for seeds other than the ionization front
GRID_TAIL_SIGMA_Z = 3.0  # tail of the slice grid, behind the centre
MAX_STORED_Z = 400
MIN_STORED_Z = 16
MAX_STORED_VALUES = 300_000  # slices x stored z in the sigma map (about 3 MB of JSON)
MAX_STEPS = 200_000
MAX_SLICES = 250_000
MAX_SLICE_STEPS = 2e9  # about half an hour at the benchmarked rate: the bound of one run
BETATRON_PHASE_PER_STEP = (
    0.08  # default dz: this many radians of betatron phase in the focusing the closed form expects
)
GROWTH_STEPS_PER_EFOLD = 25
MIN_STEPS = 200
FIT_MIN_EFOLDS = 2.0  # below, delta hardly depends on the coupling, so the fit would not see it
LINEAR_FRACTION = 0.1  # delta below this fraction of delta_sat: the linear range of the step-size report
STOP_AFTER_SATURATION_M = 0.5  # default: a run ends this far past the saturation point (project reading)
FIT_MAX_FRACTION = 0.5  # fit below half the saturation level: the linear regime


class EnvelopeSizeError(ValueError):
    """The shot needs more slices or steps than one envelope run is allowed (MAX_SLICES, MAX_STEPS, MAX_SLICE_STEPS)."""


@dataclass
class RigidSource:
    """A slice that drives the wake but does not evolve (seed bunch, noise-equivalent slice)."""

    zeta_m: float
    particles: float  # signed: particle count times (its charge number / driver charge number)
    sigma_r_m: float
    sigma_z_m: float = 0.0  # longitudinal rms; gives the form factor exp(-(k_p sigma_z)^2/2)
    label: str = ""

    def weight(self, kp: float) -> float:
        return self.particles * math.exp(-0.5 * (kp * self.sigma_z_m) ** 2)


@dataclass
class SliceGrid:
    """Slices ordered head first (index 0 is furthest ahead)."""

    zeta_m: np.ndarray
    particles: np.ndarray  # lambda_j dzeta per slice
    spacing_m: float
    sources: list[RigidSource] = field(default_factory=list)


class WakeSumBuffers:
    """The slices x nodes arrays of `transverse_wake_sum`, kept from step to step: a run's steps differ only in the
    number of kernel nodes (each step's u range), so no step allocates them again."""

    def __init__(self, slices: int) -> None:
        self.slices = slices
        self._decay = np.empty(0)
        self._sums = np.empty(0, dtype=complex)

    def arrays(self, nodes: int) -> tuple[np.ndarray, np.ndarray]:
        """(decay, sums): contiguous slices x nodes views, real and complex."""
        size = self.slices * nodes
        if self._decay.size < size:
            self._decay = np.empty(size)
            self._sums = np.empty(size, dtype=complex)
        shape = (self.slices, nodes)
        return self._decay[:size].reshape(shape), self._sums[:size].reshape(shape)


def transverse_wake_sum(
    zeta_m: np.ndarray,
    particles: np.ndarray,
    u: np.ndarray,
    kp: float,
    sources: list[RigidSource] | tuple = (),
    buffers: WakeSumBuffers | None = None,
) -> np.ndarray:
    """S_i = sum_{j ahead of i} sin(k_p(zeta_j - zeta_i)) N_j h((u_i+u_j)/2) by cumulative sums (MODEL.md section 10).

    zeta_m must be strictly decreasing (head first); N_j = lambda_j dzeta. Rigid sources act
    on the slices behind them with their own u_s = (k_p sigma_s)^2. `buffers`: the arrays of
    an earlier call of the same grid, reused.
    """
    source_u = [(kp * s.sigma_r_m) ** 2 for s in sources]
    u_all = np.concatenate([u, source_u]) if sources else u
    t, w = quadrature.kernel_rule_for(float(u_all.min()), float(u_all.max()))
    decay, acc = (buffers or WakeSumBuffers(zeta_m.size)).arrays(t.size)
    rotor = np.exp(1j * (kp * zeta_m))  # e^{i k_p zeta_j}: sin(a - b) = Im(e^{ia} e^{-ib})
    np.multiply.outer(-0.5 * u, t, out=decay)
    np.exp(decay, out=decay)  # e^{-u_i t_m / 2}
    source = particles * rotor
    # the real and imaginary parts of decay x (N rotor) written in place: the same numbers as the complex product
    np.multiply(decay, source.real[:, None], out=acc.real)
    np.multiply(decay, source.imag[:, None], out=acc.imag)
    np.cumsum(acc, axis=0, out=acc)  # row j: sum over slices 0..j (one complex pass for sin and cos)
    decay *= w
    total = np.zeros(zeta_m.size)
    # slice i sees the slices strictly ahead: the inclusive sums of row i - 1
    total[1:] = (np.einsum("im,im->i", acc[:-1], decay[1:]) * rotor[1:].conj()).imag
    for s, us in zip(sources, source_u, strict=True):
        first_behind = int(np.searchsorted(-zeta_m, -s.zeta_m, side="right"))
        if first_behind < zeta_m.size:
            kernel = decay[first_behind:] @ np.exp(-0.5 * us * t)  # h((u_i + u_s)/2)
            total[first_behind:] += s.weight(kp) * np.sin(kp * (s.zeta_m - zeta_m[first_behind:])) * kernel
    return total


def on_axis_field(
    zeta_m: np.ndarray,
    particles: np.ndarray,
    u: np.ndarray,
    kp: float,
    charge: float,
    sources: list[RigidSource] | tuple = (),
) -> np.ndarray:
    """On-axis E_z = -(k_p^2/(2 pi eps0)) q sum_j N_j R(u_j/2) cos(k_p(zeta_j - zeta_i)) [V/m] (Keinigs & Jones 1987).

    The slice's own charge counts half (the field at a thin sheet is the mean of both sides).
    """
    phase = kp * zeta_m
    sin_i, cos_i = np.sin(phase), np.cos(phase)
    q = particles * gaussian_on_axis_factor(0.5 * u)
    acc_sin = np.cumsum(q * sin_i) - 0.5 * q * sin_i
    acc_cos = np.cumsum(q * cos_i) - 0.5 * q * cos_i
    for s in sources:
        first_behind = int(np.searchsorted(-zeta_m, -s.zeta_m, side="right"))
        weight = s.weight(kp) * gaussian_on_axis_factor(0.5 * (kp * s.sigma_r_m) ** 2)
        acc_sin[first_behind:] += weight * math.sin(kp * s.zeta_m)
        acc_cos[first_behind:] += weight * math.cos(kp * s.zeta_m)
    total = cos_i * acc_cos + sin_i * acc_sin
    return -(kp * kp / (2.0 * np.pi * VACUUM_PERMITTIVITY)) * charge * total


def modulation_amplitude(zeta_m: np.ndarray, sigma_m: np.ndarray, zeta_ref: float, kp: float) -> float:
    """delta at zeta_ref: a + b(zeta - zeta_ref) + c cos + d sin(k_p zeta) fitted, delta = |(c, d)|/a (MODEL.md 4)."""
    half = np.pi / kp
    lo = int(np.searchsorted(-zeta_m, -(zeta_ref + half), side="left"))
    hi = int(np.searchsorted(-zeta_m, -(zeta_ref - half), side="right"))
    z = zeta_m[lo:hi]
    if z.size < 5:
        return float("nan")
    phase = kp * z
    basis = np.column_stack([np.ones_like(z), z - zeta_ref, np.cos(phase), np.sin(phase)])
    coef, *_ = np.linalg.lstsq(basis, sigma_m[lo:hi], rcond=None)
    return float(math.hypot(coef[2], coef[3]) / coef[0])


@dataclass
class EnvelopeSetup:
    """Everything the integrator needs, in SI (built from a validated shot by `envelope_setup`)."""

    charge_number: float
    mass_kg: float
    gamma: float
    geometric_emittance_m: float
    sigma_r_m: float
    sigma_z_m: float
    population: float
    density_m3: float
    gradient_per_m: float
    length_m: float
    reference_zeta_m: float
    saturation_modulation: float
    grid: SliceGrid
    seed_description: str

    def wavenumber(self, z: float) -> float:
        """Local k_p for n(z) = n_0 (1 + g z) (MODEL.md section 1)."""
        return float(plasma_wavenumber(self.density_m3 * (1.0 + self.gradient_per_m * z)))

    def coupling(self, kp: float) -> float:
        """Z^2 e^2 k_p^3 / (8 pi eps0 gamma M c^2) [1/m^2] (MODEL.md section 10)."""
        e = ELEMENTARY_CHARGE
        return (
            (self.charge_number * e) ** 2
            * kp**3
            / (8.0 * np.pi * VACUUM_PERMITTIVITY * self.gamma * self.mass_kg * SPEED_OF_LIGHT**2)
        )


@dataclass
class EnvelopeRun:
    """Raw integration output: every step's reference modulation, a decimated sigma map."""

    z_steps_m: np.ndarray
    modulation_steps: np.ndarray
    z_stored_m: np.ndarray
    sigma_stored_m: np.ndarray  # slices x stored z
    final_sigma_m: np.ndarray
    betatron_phase_steps: np.ndarray  # per step: dz sqrt(max |focusing|), the fastest slice's betatron phase advance
    stopped_early: bool = False  # ended past saturation (stop_after_saturation_m), before the plasma exit


@dataclass
class EnvelopeState:
    """Where an integration stands at the start of step `step`: enough to carry it on to the
    same result (the focusing at `step` is recomputed from x, y: the same numbers)."""

    step: int
    n_steps: int
    x: np.ndarray
    y: np.ndarray
    vx: np.ndarray
    vy: np.ndarray
    modulation: np.ndarray  # steps 0 .. step-1
    sigma_stored: np.ndarray  # slices x the first next_store stored z
    next_store: int
    phase_steps: np.ndarray  # betatron phase advance of steps 0 .. step-1


def integrate_envelope(
    setup: EnvelopeSetup,
    dz_m: float,
    n_stored: int,
    progress: Callable[[float], None] | None = None,
    *,
    resume: EnvelopeState | None = None,
    checkpoint: Callable[[EnvelopeState], None] | None = None,
    checkpoint_every: int = 10,
    stop_after_saturation_m: float | None = None,
) -> EnvelopeRun:
    """Advance every slice along z: velocity Verlet on the planar point (x, y) of radius sigma (MODEL.md section 10).

    `checkpoint(state)` is called every `checkpoint_every` steps with a copy of the state;
    `resume` carries on from such a state (same setup, dz and n_stored) to the same result.
    `stop_after_saturation_m`: end the run that far past the step where the saturation point
    (`saturation_point`: delta reaches the saturation level, or its first peak) is known,
    instead of at the plasma exit (project reading, MODEL.md "Project readings").
    """
    grid = setup.grid
    n_steps = max(1, int(math.ceil(setup.length_m / dz_m - 1e-9)))
    if n_steps > MAX_STEPS or n_steps * setup.grid.zeta_m.size > MAX_SLICE_STEPS:
        raise EnvelopeSizeError(
            f"{n_steps} steps of {setup.grid.zeta_m.size} slices exceed the limits ({MAX_STEPS} steps, "
            f"{MAX_SLICE_STEPS:.0e} slice-steps); choose a larger dz_m"
        )
    dz = setup.length_m / n_steps
    n = grid.zeta_m.size
    x = np.full(n, setup.sigma_r_m)
    y = np.zeros(n)
    vx = np.zeros(n)  # the entrance is a waist
    vy = np.full(n, setup.geometric_emittance_m / setup.sigma_r_m)  # angular momentum eps_g

    buffers = WakeSumBuffers(n)

    def focusing(z: float, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, float]:
        kp = setup.wavenumber(z)
        u = kp * kp * (x * x + y * y)
        wake = transverse_wake_sum(grid.zeta_m, grid.particles, u, kp, grid.sources, buffers)
        return setup.coupling(kp) * wake, kp

    stride = max(1, int(math.ceil(n_steps / max(n_stored - 1, 1))))
    stored_steps = list(range(0, n_steps + 1, stride))
    if stored_steps[-1] != n_steps:
        stored_steps.append(n_steps)
    sigma_stored = np.empty((n, len(stored_steps)))
    modulation = np.empty(n_steps + 1)
    next_store = 0
    phase_steps = np.empty(n_steps)
    report_every = max(1, n_steps // 100)
    first = 0
    if resume is not None:
        if resume.n_steps != n_steps or resume.x.shape != (n,) or resume.sigma_stored.shape[0] != n:
            raise ValueError("the saved state belongs to another grid or step")
        first, next_store = resume.step, resume.next_store
        x, y, vx, vy = (np.array(a, dtype=float) for a in (resume.x, resume.y, resume.vx, resume.vy))
        modulation[:first] = resume.modulation
        phase_steps[:first] = resume.phase_steps
        sigma_stored[:, :next_store] = resume.sigma_stored

    watch = _SaturationWatch(setup.saturation_modulation)
    for k in range(first):  # a resumed run knows what the steps before it saw
        watch.see(k, float(modulation[k]))
    stop_step = n_steps
    extra_steps = None if stop_after_saturation_m is None else int(math.ceil(stop_after_saturation_m / dz - 1e-9))
    if extra_steps is not None and watch.known_at is not None:
        stop_step = min(n_steps, watch.known_at + extra_steps)

    g, kp = focusing(first * dz, x, y)
    for step in range(first, n_steps + 1):
        if checkpoint is not None and step > first and step % checkpoint_every == 0:
            checkpoint(
                EnvelopeState(
                    step,
                    n_steps,
                    x.copy(),
                    y.copy(),
                    vx.copy(),
                    vy.copy(),
                    modulation[:step].copy(),
                    sigma_stored[:, :next_store].copy(),
                    next_store,
                    phase_steps[:step].copy(),
                )
            )
        sigma = np.hypot(x, y)
        modulation[step] = modulation_amplitude(grid.zeta_m, sigma, setup.reference_zeta_m, kp)
        if extra_steps is not None and watch.known_at is None and watch.see(step, float(modulation[step])):
            stop_step = min(n_steps, step + extra_steps)
        if step == stored_steps[next_store] or step == stop_step:
            sigma_stored[:, next_store] = sigma
            next_store += 1
        if step == stop_step:
            break
        phase_steps[step] = dz * math.sqrt(float(np.abs(g).max()))
        half = 0.5 * dz
        vx -= half * g * x
        vy -= half * g * y
        x += dz * vx
        y += dz * vy
        g, kp = focusing((step + 1) * dz, x, y)
        vx -= half * g * x
        vy -= half * g * y
        if progress is not None and (step + 1) % report_every == 0:
            progress((step + 1) / n_steps)
    if progress is not None:
        progress(1.0)
    return EnvelopeRun(
        z_steps_m=np.arange(stop_step + 1) * dz,
        modulation_steps=modulation[: stop_step + 1],
        z_stored_m=np.array([k for k in stored_steps if k < stop_step] + [stop_step], dtype=float) * dz,
        sigma_stored_m=sigma_stored[:, :next_store],
        final_sigma_m=np.hypot(x, y),
        betatron_phase_steps=phase_steps[:stop_step],
        stopped_early=stop_step < n_steps,
    )


class _SaturationWatch:
    """Step by step, the step at which `saturation_point` of the steps so far is settled: delta
    reaches the level, or falls after it reached a tenth of it (its first peak)."""

    def __init__(self, level: float) -> None:
        self.level = level
        self.high = False
        self.last = math.nan
        self.known_at: int | None = None

    def see(self, step: int, delta: float) -> bool:
        """Take the next step's delta; True the first time the saturation point is known."""
        if self.known_at is not None:
            return False
        fell = self.high and delta < self.last
        self.high = self.high or delta >= 0.1 * self.level
        self.last = delta
        if fell or delta >= self.level:
            self.known_at = step
            return True
        return False


def envelope_setup(
    shot: Mapping[str, Any],
    settings: Mapping[str, Any],
    slices_per_wavelength: int,
    *,
    line_profile: str = "gaussian",
    zeta_tail_m: float | None = None,
    noise_eta: float | None = None,
    noise_wanted: bool = False,
) -> EnvelopeSetup:
    """Slice grid, seed sources and SI constants of a validated shot (MODEL.md sections 1-3, 10)."""
    d, p, s = shot["driver"], shot["plasma"], shot["seed"]
    mass_kg, charge_number = driver_mass_and_charge(
        d["species"], d.get("mass_amu", np.nan), d.get("charge_state", np.nan)
    )
    mass, charge = float(mass_kg), float(charge_number)
    momentum = d["momentum_gev"] * GEV_PER_C
    sigma_z = d["sigma_z_mm"] * MM
    sigma_r = d["sigma_r_mm"] * MM
    population = d["population"]
    density = plasma_density_m3(p["density_cm3"], settings)
    gradient = p["gradient_pct_per_m"] * PCT
    length = p["length_m"]
    method = s["method"]
    zeta_s = s["position_mm"] * MM if method in SEEDED_METHODS else 0.0
    zeta_ref = zeta_s - settings["reference_slice_sigma"] * sigma_z
    kp_max = float(plasma_wavenumber(density * max(1.0, 1.0 + gradient * length)))
    spacing = 2.0 * np.pi / (kp_max * slices_per_wavelength)
    if method == "ionization_front":
        head = zeta_s
    else:  # preformed plasma: start where the Gaussian is negligible, and ahead of the reference slice
        head = max(GRID_HEAD_SIGMA_Z * sigma_z, zeta_ref + 2.0 * np.pi / kp_max)
    tail = -GRID_TAIL_SIGMA_Z * sigma_z if zeta_tail_m is None else zeta_tail_m
    tail = min(tail, zeta_ref - 2.0 * np.pi / kp_max)
    n_slices = int(math.ceil((head - tail) / spacing))
    if n_slices > MAX_SLICES:
        raise EnvelopeSizeError(
            f"the bunch spans {n_slices} slices at {slices_per_wavelength} per plasma wavelength; "
            f"the envelope solver takes at most {MAX_SLICES}"
        )
    zeta = head - (np.arange(n_slices) + 0.5) * spacing
    if line_profile == "gaussian":
        lam = line_density(zeta, population, sigma_z)
    elif line_profile == "uniform":
        lam = np.full(n_slices, float(line_density(0.0, population, sigma_z)))
    else:
        raise ValueError(f"unknown line_profile {line_profile!r} (gaussian or uniform)")
    sources: list[RigidSource] = []
    described = {
        "ionization_front": f"bunch cut at the ionization front {zeta_s:.6g} m",
        "electron_bunch": f"rigid electron bunch at {zeta_s:.6g} m in a preformed plasma",
        "none": "no seed",
    }[method]
    if method == "electron_bunch":
        sources.append(
            RigidSource(
                zeta_m=zeta_s,
                particles=-(s["electron_charge_pc"] * PC / ELEMENTARY_CHARGE) / charge,
                sigma_r_m=s["electron_sigma_r_mm"] * MM,
                sigma_z_m=s["electron_sigma_z_mm"] * MM,
                label="electron seed bunch",
            )
        )
    if noise_wanted and noise_eta is not None:
        lam_ref = line_density(zeta_ref, population, sigma_z) if line_profile == "gaussian" else lam[0]
        kp0 = float(plasma_wavenumber(density))
        sources.append(
            RigidSource(
                zeta_m=head,
                particles=float(noise_eta * lam_ref / kp0),
                sigma_r_m=sigma_r,
                label="noise-equivalent slice",
            )
        )
        described += f"; noise-equivalent slice (eta = {noise_eta:.3g}) at the grid head {head:.6g} m"
    return EnvelopeSetup(
        charge_number=charge,
        mass_kg=mass,
        gamma=float(lorentz_factor(momentum, mass)),
        geometric_emittance_m=float(geometric_emittance(d["emittance_n_mm_mrad"] * MM_MRAD, momentum, mass)),
        sigma_r_m=sigma_r,
        sigma_z_m=sigma_z,
        population=population,
        density_m3=float(density),
        gradient_per_m=gradient,
        length_m=length,
        reference_zeta_m=zeta_ref,
        saturation_modulation=settings["saturation_modulation"],
        grid=SliceGrid(zeta_m=zeta, particles=lam * spacing, spacing_m=spacing, sources=sources),
        seed_description=described,
    )


def default_step(setup: EnvelopeSetup, closed_form: Mapping[str, Any]) -> float:
    """Default dz [m]: the smallest of L/200, 1/25 of the closed form's e-fold length at z_ref, beta*/20, and
    0.08 rad of betatron phase in the strongest expected wake (the saturated wake of section 4, or the cut's own
    focusing, whichever is larger)."""
    kp = setup.wavenumber(0.0)
    rest_energy = setup.gamma * setup.mass_kg * SPEED_OF_LIGHT**2
    limits = [setup.length_m / MIN_STEPS]
    z_ref = closed_form.get("saturation_length_m") or setup.length_m
    n_ref = (closed_form.get("efolds_exit") or 0.0) * (z_ref / setup.length_m) ** (2.0 / 3.0)
    if n_ref > 0.0:
        limits.append(1.5 * z_ref / n_ref / GROWTH_STEPS_PER_EFOLD)
    if setup.geometric_emittance_m > 0.0:
        limits.append(setup.sigma_r_m**2 / setup.geometric_emittance_m / 20.0)
    wake = closed_form.get("wakefield_estimate_mv_m") or 0.0
    modulation = closed_form.get("modulation_exit") or 0.0
    if wake > 0.0 and modulation > 0.0:
        wake_sat = wake * MV_PER_M * setup.saturation_modulation / modulation
        k2_wake = abs(setup.charge_number) * ELEMENTARY_CHARGE * wake_sat * kp / rest_energy
    else:
        k2_wake = 0.0
    u = (kp * setup.sigma_r_m) ** 2
    peak_particles = float(setup.grid.particles.max()) / setup.grid.spacing_m
    k2_cut = 2.0 * setup.coupling(kp) * peak_particles * float(wake_kernel_h(u)) / kp
    k2 = max(k2_wake, k2_cut)
    if k2 > 0.0:
        limits.append(BETATRON_PHASE_PER_STEP / math.sqrt(k2))
    return min(limits)


def _crossing(z: np.ndarray, y: np.ndarray, level: float) -> float | None:
    """First z where y reaches level, interpolated linearly in ln y."""
    above = np.nonzero(y >= level)[0]
    if above.size == 0:
        return None
    i = int(above[0])
    if i == 0:
        return float(z[0])
    y0, y1 = math.log(y[i - 1]), math.log(y[i])
    f = (math.log(level) - y0) / (y1 - y0) if y1 > y0 else 1.0
    return float(z[i - 1] + f * (z[i] - z[i - 1]))


def saturation_point(z: np.ndarray, delta: np.ndarray, level: float) -> tuple[float | None, str | None]:
    """Where the solver's growth ends: delta reaches `level`, or delta peaks (first local maximum above level/10),
    whichever comes first. Returns (z, reason)."""
    crossing = _crossing(z, delta, level)
    high = np.nonzero(delta >= 0.1 * level)[0]
    peak = None
    if high.size:
        start = int(high[0])
        falls = np.nonzero(np.diff(delta[start:]) < 0.0)[0]
        if falls.size:
            peak = float(z[start + int(falls[0])])
    if peak is not None and (crossing is None or peak < crossing):
        return peak, "growth stopped"
    if crossing is not None:
        return crossing, "reached saturation_modulation"
    return None, None


def closed_form_curves(
    shot: Mapping[str, Any], settings: Mapping[str, Any], z_m: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form N(z) and linear delta(z) (MODEL.md section 4), from the closed-form model's own curve function."""
    curves = growth_along_plasma(clean_shot_columns(shot), z_m, settings)
    return curves["efolds"], curves["modulation"]


def fit_efolds(z: np.ndarray, delta: np.ndarray, n_closed: np.ndarray) -> tuple[float, float] | None:
    """Scale kappa of the closed form's e-folds that best fits the solver: ln delta = a + 2 ln z + ln|S(x)| at
    N = kappa N_closed, by least squares over the given samples (the growth law of MODEL.md section 4 with a free
    coupling); returns (kappa, a)."""
    good = np.isfinite(delta) & (delta > 0.0) & np.isfinite(n_closed) & (n_closed > 0.0) & (z > 0.0)
    if good.sum() < 4:
        return None
    y, n, log_z2 = np.log(delta[good]), n_closed[good], 2.0 * np.log(z[good])

    def residual(kappa: float) -> tuple[float, float]:
        shape = log_z2 + log_series_magnitude(kappa * n)
        a = float(np.mean(y - shape))
        return float(np.sum((y - shape - a) ** 2)), a

    # Imported here: scipy.optimize takes ~0.3 s to import, which every process that imports
    # the model (the server, workers, each command) would otherwise pay for this one fit.
    from scipy.optimize import minimize_scalar

    best = minimize_scalar(lambda k: residual(k)[0], bounds=(0.05, 20.0), method="bounded", options={"xatol": 1e-6})
    return float(best.x), residual(float(best.x))[1]


def seed_force_ratio(shot: Mapping[str, Any], settings: Mapping[str, Any] | None = None) -> float:
    """rho = [h((u+u_s)/2)/h(u)]/[R(a_s)/R(a)]: solver's electron-seed force over the closed form's (MODEL.md 3, 10)."""
    clean = validate_shot(shot)
    if clean["seed"]["method"] != "electron_bunch":
        raise ValueError("the seed force ratio is defined for an electron_bunch seed")
    kp = float(plasma_wavenumber(plasma_density_m3(clean["plasma"]["density_cm3"], resolve_settings(settings))))
    u = (kp * clean["driver"]["sigma_r_mm"] * MM) ** 2
    u_seed = (kp * clean["seed"]["electron_sigma_r_mm"] * MM) ** 2
    force = float(wake_kernel_h(0.5 * (u + u_seed)) / wake_kernel_h(u))
    field = float(gaussian_on_axis_factor(0.5 * u_seed) / gaussian_on_axis_factor(0.5 * u))
    return force / field


def simulate_envelope(
    shot: Mapping[str, Any],
    settings: Mapping[str, Any] | None = None,
    slices_per_wavelength: int = 16,
    dz_m: float | None = None,
    progress: Callable[[float], None] | None = None,
    *,
    line_profile: str = "gaussian",
    zeta_tail_m: float | None = None,
    max_stored_z: int = MAX_STORED_Z,
    resume: EnvelopeState | None = None,
    checkpoint: Callable[[EnvelopeState], None] | None = None,
    stop_after_saturation_m: float | None = STOP_AFTER_SATURATION_M,
) -> dict[str, Any]:
    """Envelope solution sigma(zeta, z) of one shot: delta at the reference slice, the closed form beside (MODEL.md 10).

    line_profile "uniform" replaces the Gaussian line density by its peak value on the whole
    grid and zeta_tail_m moves the grid's tail (both for checks of the long-beam theory).
    checkpoint and resume are integrate_envelope's (a run carried on from a saved state).
    stop_after_saturation_m: the run ends that far past the saturation point (None: at the
    plasma exit); beyond saturation the envelope model is qualitative (MODEL.md "Project readings").
    """
    clean = validate_shot(shot)
    s = resolve_settings(settings)
    if int(slices_per_wavelength) != slices_per_wavelength or slices_per_wavelength < 16:
        raise ValueError("slices_per_wavelength must be an integer >= 16")
    if dz_m is not None and not (math.isfinite(dz_m) and dz_m > 0.0):
        raise ValueError("dz_m must be a positive number of metres")
    if stop_after_saturation_m is not None and not (
        math.isfinite(stop_after_saturation_m) and stop_after_saturation_m >= 0.0
    ):
        raise ValueError("stop_after_saturation_m must be a distance >= 0 in metres, or None")
    started = time.perf_counter()
    closed = evaluate_shot(clean, s)
    method = clean["seed"]["method"]
    stn = closed["seed_to_noise_efolds"]
    noise_wanted = method == "none" or (stn is not None and stn < 0.0)
    d = clean["driver"]
    sigma_z = d["sigma_z_mm"] * MM
    zeta_s = clean["seed"]["position_mm"] * MM if method in SEEDED_METHODS else 0.0
    zeta_ref = zeta_s - s["reference_slice_sigma"] * sigma_z
    kp0 = float(plasma_wavenumber(plasma_density_m3(clean["plasma"]["density_cm3"], s)))
    eta = float(relative_noise(line_density(zeta_ref, d["population"], sigma_z), kp0, s["noise_floor"]))
    setup = envelope_setup(
        clean,
        s,
        int(slices_per_wavelength),
        line_profile=line_profile,
        zeta_tail_m=zeta_tail_m,
        noise_eta=eta,
        noise_wanted=noise_wanted,
    )
    step = default_step(setup, closed) if dz_m is None else float(dz_m)
    n_slices = setup.grid.zeta_m.size
    n_stored = int(min(max_stored_z, max(MIN_STORED_Z, MAX_STORED_VALUES // n_slices)))
    run = integrate_envelope(
        setup,
        step,
        n_stored,
        progress,
        resume=resume,
        checkpoint=checkpoint,
        stop_after_saturation_m=stop_after_saturation_m,
    )
    end_z = float(run.z_steps_m[-1])

    z_all, delta_all = run.z_steps_m, run.modulation_steps
    sat = setup.saturation_modulation
    saturation_z, saturation_reason = saturation_point(z_all, delta_all, sat)
    valid_until = saturation_z if saturation_z is not None else setup.length_m
    linear = np.flatnonzero(
        np.maximum.accumulate(delta_all[:-1]) < LINEAR_FRACTION * sat
    )  # steps before delta first reaches it
    n_cf_all, delta_cf_all = closed_form_curves(clean, s, z_all)
    in_fit = (z_all <= valid_until) & (n_cf_all >= FIT_MIN_EFOLDS) & (delta_all <= FIT_MAX_FRACTION * sat)
    fit = fit_efolds(z_all[in_fit], delta_all[in_fit], n_cf_all[in_fit])
    fit_end = float(z_all[in_fit][-1]) if in_fit.any() else None
    fitted = closed_at_fit = None
    if fit is not None and fit_end is not None:
        closed_at_fit = float(n_cf_all[in_fit][-1])
        fitted = fit[0] * closed_at_fit
    stored_index = np.searchsorted(z_all, run.z_stored_m - 1e-12)
    kp_exit = setup.wavenumber(end_z)
    ez = on_axis_field(
        setup.grid.zeta_m,
        setup.grid.particles,
        (kp_exit * run.final_sigma_m) ** 2,
        kp_exit,
        setup.charge_number * ELEMENTARY_CHARGE,
        setup.grid.sources,
    )
    if saturation_reason == "growth stopped" and saturation_z is not None:
        note = (
            f"valid until saturation: the modulation stops growing at z = {saturation_z:.3g} m "
            f"(delta = {float(np.interp(saturation_z, z_all, delta_all)):.2g}); "
            "beyond it the envelope model is qualitative"
        )
    elif saturation_z is not None:
        note = (
            f"valid until saturation: delta reaches {sat:g} at z = {saturation_z:.3g} m; "
            "beyond it the envelope model is qualitative"
        )
    else:
        note = "the modulation stays below saturation: valid over the whole plasma"
    if run.stopped_early:
        note += (
            f"; the run stopped at z = {end_z:.3g} m, {stop_after_saturation_m:g} m past the saturation point "
            f"(the plasma is {setup.length_m:.3g} m long)"
        )
    return {
        "z_m": run.z_stored_m,
        "zeta_m": setup.grid.zeta_m,
        "sigma_r_m": run.sigma_stored_m,
        "reference_zeta_m": setup.reference_zeta_m,
        "reference_modulation": delta_all[stored_index],
        "z_steps_m": z_all,
        "reference_modulation_steps": delta_all,
        "closed_form_modulation": np.minimum(delta_cf_all[stored_index], sat),
        "closed_form_modulation_steps": np.minimum(delta_cf_all, sat),
        "closed_form_efolds": n_cf_all[stored_index],
        "saturation_modulation": sat,
        "saturation_z_m": saturation_z,
        "saturation_reason": saturation_reason,
        "closed_form_saturation_z_m": closed["saturation_length_m"],
        "valid_until_m": valid_until,
        "validity_note": note,
        "fitted_efolds": fitted,
        "closed_form_efolds_at_fit": closed_at_fit,
        "efolds_difference": None if fitted is None or closed_at_fit is None else fitted - closed_at_fit,
        "fit_range_m": None if fit_end is None else [float(z_all[in_fit][0]), fit_end],
        "ez_z_m": end_z,
        "stop_after_saturation_m": stop_after_saturation_m,
        "stopped_at_m": end_z if run.stopped_early else None,
        "plasma_length_m": setup.length_m,
        "ez_v_m": ez,
        "numerics": {
            "slices": n_slices,
            "slices_per_wavelength": int(slices_per_wavelength),
            "slice_spacing_m": setup.grid.spacing_m,
            "grid_head_m": float(setup.grid.zeta_m[0] + 0.5 * setup.grid.spacing_m),
            "grid_tail_m": float(setup.grid.zeta_m[-1] - 0.5 * setup.grid.spacing_m),
            "dz_m": float(z_all[1] - z_all[0]) if z_all.size > 1 else setup.length_m,
            "dz_default": dz_m is None,
            "steps": int(z_all.size - 1),
            "kernel_rule": f"trapezoid in ln t, step {quadrature.KERNEL_STEP}, cut to each step's u range",
            "max_betatron_phase_per_step": float(run.betatron_phase_steps.max(initial=0.0)),
            "max_betatron_phase_per_step_linear": float(run.betatron_phase_steps[linear].max(initial=0.0)),
            "max_betatron_phase_per_step_to_saturation": float(
                run.betatron_phase_steps[z_all[:-1] <= valid_until].max(initial=0.0)
            ),
            "seed": setup.seed_description,
            "noise_seeded": bool(noise_wanted),
            "relative_noise": eta,
            "line_profile": line_profile,
            "wall_time_s": time.perf_counter() - started,
        },
    }


def envelope_result_to_json(result: Mapping[str, Any], digits: int = 6) -> dict[str, Any]:
    """JSON-ready copy of a simulate_envelope result: arrays to lists of `digits` significant digits, NaN None."""

    def convert(value: Any) -> Any:
        if isinstance(value, np.ndarray):
            return convert(value.tolist()) if value.dtype.kind not in "fc" else _rounded_list(value, digits)
        if isinstance(value, Mapping):
            return {str(k): convert(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [convert(v) for v in value]
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        if isinstance(value, (int, np.integer)):
            return int(value)
        if isinstance(value, (float, np.floating)):
            return _rounded(float(value), digits)
        return value

    return convert(result)


def _rounded(x: float, digits: int) -> float | None:
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def _rounded_list(values: np.ndarray, digits: int) -> list:
    if values.ndim > 1:
        return [_rounded_list(row, digits) for row in values]
    return [_rounded(float(v), digits) for v in values]
