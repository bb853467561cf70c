"""Small pure-numpy integrators for making test data and sample runs.

Two schemes, each as a one-step kernel and as a driver that records frames:

- velocity Verlet (microcanonical, NVE): :func:`velocity_verlet_step`, :func:`run_velocity_verlet`;
- BAOAB Langevin splitting (canonical, NVT) that also books the heat exchanged with the bath:
  :func:`baoab_step`, :func:`run_baoab`.

Array convention
----------------
Positions and velocities have shape ``(..., n_atoms, dim)``; leading axes (if any) are independent
replicas (walkers) integrated side by side. ``masses_amu`` has shape ``(n_atoms,)``. Energies (potential,
kinetic, bath heat) are per replica: shape ``(...)``, a plain float when there are no leading axes.

A force function takes positions and returns ``(forces, potential)``: forces with the shape of the
positions (kJ mol^-1 nm^-1) and the potential energy per replica (kJ/mol).

Units are the internal ones (nm, ps, amu, kJ/mol, K, nm/ps; 1 amu nm^2 ps^-2 = 1 kJ/mol), so any
consistent set works as long as ``temperature_K`` means ``kT / KB_KJ_PER_MOL_K``.

The drivers are progress generators (:mod:`phasewake.core.progress`): ``result_of(run_baoab(...))``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.progress import Progress, Work
from phasewake.core.units import KB_KJ_PER_MOL_K

#: positions (..., n_atoms, dim) nm -> (forces (..., n_atoms, dim) kJ mol^-1 nm^-1, potential (...) kJ/mol)
ForceFunction = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray | float]]

_PROGRESS_EVERY_STEPS = 500


@dataclass(frozen=True)
class IntegratedRun:
    """Frames recorded by :func:`run_velocity_verlet` or :func:`run_baoab`.

    Attributes
    ----------
    time_ps : ndarray, shape (n_frames,), ps
    step : ndarray, shape (n_frames,), int64; integration step of each frame (frame 0 is step 0)
    positions_nm : ndarray, shape (n_frames, ..., n_atoms, dim), float64, nm
    velocities_nm_per_ps : ndarray, shape (n_frames, ..., n_atoms, dim), float64, nm/ps
    potential_kJ_per_mol, kinetic_kJ_per_mol : ndarray, shape (n_frames, ...), kJ/mol
    bath_heat_kJ_per_mol : ndarray, shape (n_frames, ...), kJ/mol
        Cumulative energy the thermostat took out of the system since step 0 (zero for NVE).
    integrator : "velocity-verlet" or "baoab"
    timestep_ps, record_every, n_steps : the settings of the run
    temperature_K, friction_per_ps : thermostat settings (None for NVE)
    seed : seed of the random stream (None for NVE, or when a Generator was passed)
    """

    time_ps: np.ndarray
    step: np.ndarray
    positions_nm: np.ndarray
    velocities_nm_per_ps: np.ndarray
    potential_kJ_per_mol: np.ndarray
    kinetic_kJ_per_mol: np.ndarray
    bath_heat_kJ_per_mol: np.ndarray
    integrator: str
    timestep_ps: float
    record_every: int
    n_steps: int
    temperature_K: float | None = None
    friction_per_ps: float | None = None
    seed: int | None = None

    @property
    def total_kJ_per_mol(self) -> np.ndarray:
        """Kinetic + potential energy, shape (n_frames, ...), kJ/mol."""
        return self.kinetic_kJ_per_mol + self.potential_kJ_per_mol

    @property
    def conserved_kJ_per_mol(self) -> np.ndarray:
        """Total energy + cumulative bath heat: constant up to integration error, kJ/mol."""
        return self.total_kJ_per_mol + self.bath_heat_kJ_per_mol

    @property
    def n_frames(self) -> int:
        return int(self.time_ps.shape[0])


def _sum_per_replica(a: np.ndarray) -> np.ndarray:
    """Sum over the last two axes (atoms, components); shape (...). Faster than np.sum(axis=(-2, -1))."""
    if a.ndim == 2:
        return np.asarray(a.sum())
    return np.einsum("...ij->...", a)


def kinetic_energy(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray) -> np.ndarray:
    """Kinetic energy per replica.

    Parameters
    ----------
    velocities_nm_per_ps : ndarray, shape (..., n_atoms, dim), nm/ps
    masses_amu : ndarray, shape (n_atoms,), amu

    Returns
    -------
    ndarray, shape (...), kJ/mol
    """
    v = np.asarray(velocities_nm_per_ps, dtype=np.float64)
    m = np.asarray(masses_amu, dtype=np.float64)
    return 0.5 * _sum_per_replica(m[:, None] * v * v)


def velocity_verlet_step(
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray,
    forces: np.ndarray,
    *,
    inv_masses: np.ndarray,
    force_fn: ForceFunction,
    timestep_ps: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | float]:
    """One velocity-Verlet step (Swope, Andersen, Berens and Wilson, J. Chem. Phys. 76, 637 (1982)).

    Parameters
    ----------
    positions_nm, velocities_nm_per_ps, forces : ndarray, shape (..., n_atoms, dim)
        State at the start of the step and the forces there (kJ mol^-1 nm^-1).
    inv_masses : ndarray, shape (n_atoms, 1), 1/amu
    force_fn : ForceFunction
    timestep_ps : float

    Returns
    -------
    (positions, velocities, forces, potential) at the end of the step. New arrays; inputs unchanged.
    """
    dt = timestep_ps
    v = velocities_nm_per_ps + (0.5 * dt) * forces * inv_masses
    x = positions_nm + dt * v
    f, u = force_fn(x)
    v = v + (0.5 * dt) * f * inv_masses
    return x, v, f, u


def baoab_step(
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray,
    forces: np.ndarray,
    *,
    masses_amu: np.ndarray,
    force_fn: ForceFunction,
    timestep_ps: float,
    friction_per_ps: float,
    temperature_K: float,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | float, np.ndarray]:
    """One BAOAB Langevin step, with the heat the O part exchanged with the bath.

    B: half kick; A: half drift; O: exact Ornstein-Uhlenbeck velocity update
    v <- c1 v + sqrt((1 - c1^2) kT/m) xi with c1 = exp(-gamma dt); A: half drift; B: half kick.
    Leimkuhler and Matthews, "Rational construction of stochastic numerical methods for molecular
    sampling", Appl. Math. Res. Express 2013, 34-56 (2013); also J. Chem. Phys. 138, 174102 (2013)
    (journal details from memory).

    The heat is the kinetic-energy change of the O part, counted as energy leaving the system
    (K before O minus K after O): the deterministic B and A parts are a velocity-Verlet step, so
    K + U + cumulative heat is conserved up to their integration error (the heat/shadow-work split of
    Sivak, Chodera and Crooks, Phys. Rev. X 3, 011007 (2013), from memory).

    Parameters
    ----------
    positions_nm, velocities_nm_per_ps, forces : ndarray, shape (..., n_atoms, dim)
    masses_amu : ndarray, shape (n_atoms,), amu
    force_fn : ForceFunction
    timestep_ps : float
    friction_per_ps : float
        Collision rate gamma, 1/ps.
    temperature_K : float
    rng : numpy.random.Generator
        Draws ``positions.size`` standard normals per step.

    Returns
    -------
    (positions, velocities, forces, potential, heat): heat per replica, shape (...), kJ/mol.
    """
    m = np.asarray(masses_amu, dtype=np.float64)[:, None]
    c1, sigma = _ou_coefficients(m, timestep_ps, friction_per_ps, temperature_K)
    return _baoab(positions_nm, velocities_nm_per_ps, forces, m, 1.0 / m, c1, sigma, force_fn, timestep_ps, rng)


def _ou_coefficients(
    m_col: np.ndarray, timestep_ps: float, friction_per_ps: float, temperature_K: float
) -> tuple[float, np.ndarray]:
    """c1 = exp(-gamma dt) and the noise amplitude sqrt((1 - c1^2) kT/m), shape (n_atoms, 1)."""
    c1 = float(np.exp(-friction_per_ps * timestep_ps))
    return c1, np.sqrt((1.0 - c1 * c1) * KB_KJ_PER_MOL_K * temperature_K / m_col)


def _baoab(
    x: np.ndarray,
    v: np.ndarray,
    f: np.ndarray,
    m: np.ndarray,
    inv_m: np.ndarray,
    c1: float,
    sigma: np.ndarray,
    force_fn: ForceFunction,
    dt: float,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | float, np.ndarray]:
    v = v + (0.5 * dt) * f * inv_m
    x = x + (0.5 * dt) * v
    k_before = 0.5 * _sum_per_replica(m * v * v)
    v = c1 * v + sigma * rng.standard_normal(v.shape)
    k_after = 0.5 * _sum_per_replica(m * v * v)
    x = x + (0.5 * dt) * v
    f, u = force_fn(x)
    v = v + (0.5 * dt) * f * inv_m
    return x, v, f, u, k_before - k_after


def _check_inputs(
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray,
    masses_amu: np.ndarray,
    timestep_ps: float,
    n_steps: int,
    record_every: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    x = np.array(positions_nm, dtype=np.float64)
    v = np.array(velocities_nm_per_ps, dtype=np.float64)
    m = np.asarray(masses_amu, dtype=np.float64)
    if x.ndim < 2 or x.shape != v.shape:
        raise ValueError("positions and velocities must have the same shape (..., n_atoms, dim)")
    if m.shape != (x.shape[-2],):
        raise ValueError(f"masses must have shape ({x.shape[-2]},), got {m.shape}")
    if not np.all(m > 0):
        raise ValueError("masses must be positive")
    if not timestep_ps > 0:
        raise ValueError("timestep_ps must be positive")
    if n_steps < 0 or record_every < 1:
        raise ValueError("n_steps must be >= 0 and record_every >= 1")
    return x, v, m


class _Recorder:
    def __init__(self, x: np.ndarray, n_steps: int, record_every: int) -> None:
        n_frames = n_steps // record_every + 1
        rep = x.shape[:-2]
        self.pos = np.empty((n_frames, *x.shape))
        self.vel = np.empty((n_frames, *x.shape))
        self.pot = np.empty((n_frames, *rep))
        self.kin = np.empty((n_frames, *rep))
        self.heat = np.empty((n_frames, *rep))
        self.step = np.arange(n_frames, dtype=np.int64) * record_every
        self.i = 0

    def add(self, x: np.ndarray, v: np.ndarray, u: np.ndarray | float, k: np.ndarray, q: np.ndarray) -> None:
        self.pos[self.i] = x
        self.vel[self.i] = v
        self.pot[self.i] = u
        self.kin[self.i] = k
        self.heat[self.i] = q
        self.i += 1

    def result(self, **settings: Any) -> IntegratedRun:
        """The recorded frames as an :class:`IntegratedRun` with the integrator's ``settings``."""
        return IntegratedRun(time_ps=self.step * settings["timestep_ps"], step=self.step, positions_nm=self.pos,
                             velocities_nm_per_ps=self.vel, potential_kJ_per_mol=self.pot,
                             kinetic_kJ_per_mol=self.kin, bath_heat_kJ_per_mol=self.heat, **settings)


# one step: (x, v, f) -> (x, v, f, potential, heat the bath took in this step or None without a bath)
_StepResult = tuple[np.ndarray, np.ndarray, np.ndarray, "np.ndarray | float", "np.ndarray | None"]


def _integrate(x: np.ndarray, v: np.ndarray, m: np.ndarray, force_fn: ForceFunction,
               step: Callable[[np.ndarray, np.ndarray, np.ndarray], _StepResult], *, n_steps: int,
               record_every: int, label: str) -> Work[_Recorder]:
    """The loop of every integrator: ``n_steps`` calls of ``step``, the start and every ``record_every``-th
    state recorded with the cumulative bath heat, progress every ``_PROGRESS_EVERY_STEPS`` steps."""
    f, u = force_fn(x)
    rec = _Recorder(x, n_steps, record_every)
    heat = np.zeros(x.shape[:-2])
    rec.add(x, v, u, kinetic_energy(v, m), heat)
    for i in range(1, n_steps + 1):
        x, v, f, u, q = step(x, v, f)
        if q is not None:
            heat = heat + q
        if i % record_every == 0 and rec.i < rec.pos.shape[0]:
            rec.add(x, v, u, kinetic_energy(v, m), heat)
        if i % _PROGRESS_EVERY_STEPS == 0:
            yield Progress(i, n_steps, label)
    return rec


def run_velocity_verlet(
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray,
    masses_amu: np.ndarray,
    force_fn: ForceFunction,
    *,
    timestep_ps: float,
    n_steps: int,
    record_every: int = 1,
) -> Work[IntegratedRun]:
    """Integrate Newton's equations with velocity Verlet and record every ``record_every`` steps.

    Parameters
    ----------
    positions_nm, velocities_nm_per_ps : ndarray, shape (..., n_atoms, dim)
        Start state (recorded as frame 0).
    masses_amu : ndarray, shape (n_atoms,)
    force_fn : ForceFunction
    timestep_ps : float
    n_steps : int
    record_every : int

    Returns
    -------
    Generator yielding :class:`Progress` and returning an :class:`IntegratedRun` with
    ``n_steps // record_every + 1`` frames (bath heat zero).
    """
    x, v, m = _check_inputs(positions_nm, velocities_nm_per_ps, masses_amu, timestep_ps, n_steps, record_every)
    inv_m = (1.0 / m)[:, None]

    def step(x: np.ndarray, v: np.ndarray, f: np.ndarray) -> _StepResult:
        return (*velocity_verlet_step(x, v, f, inv_masses=inv_m, force_fn=force_fn, timestep_ps=timestep_ps), None)

    rec = yield from _integrate(x, v, m, force_fn, step, n_steps=n_steps, record_every=record_every,
                                label="velocity Verlet")
    return rec.result(integrator="velocity-verlet", timestep_ps=float(timestep_ps), record_every=record_every,
                      n_steps=n_steps)


def run_baoab(
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray,
    masses_amu: np.ndarray,
    force_fn: ForceFunction,
    *,
    timestep_ps: float,
    n_steps: int,
    temperature_K: float,
    friction_per_ps: float,
    seed: int | np.random.Generator,
    record_every: int = 1,
) -> Work[IntegratedRun]:
    """Integrate Langevin dynamics with BAOAB (see :func:`baoab_step`) and record frames and bath heat.

    Parameters
    ----------
    positions_nm, velocities_nm_per_ps, masses_amu, force_fn, timestep_ps, n_steps, record_every
        As for :func:`run_velocity_verlet`.
    temperature_K : float
        Bath temperature.
    friction_per_ps : float
        Collision rate gamma (1/ps); applied to every atom.
    seed : int or numpy.random.Generator
        An int seeds a fresh PCG64 stream, so a run is reproducible from its settings.

    Returns
    -------
    Generator yielding :class:`Progress` and returning an :class:`IntegratedRun`; its
    ``bath_heat_kJ_per_mol`` is the cumulative energy the bath took out of the system.
    """
    x, v, m = _check_inputs(positions_nm, velocities_nm_per_ps, masses_amu, timestep_ps, n_steps, record_every)
    if friction_per_ps < 0 or temperature_K < 0:
        raise ValueError("friction_per_ps and temperature_K must be >= 0")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.Generator(np.random.PCG64(seed))
    m_col = m[:, None]
    inv_m = 1.0 / m_col
    c1, sigma = _ou_coefficients(m_col, timestep_ps, friction_per_ps, temperature_K)

    def step(x: np.ndarray, v: np.ndarray, f: np.ndarray) -> _StepResult:
        return _baoab(x, v, f, m_col, inv_m, c1, sigma, force_fn, timestep_ps, rng)

    rec = yield from _integrate(x, v, m, force_fn, step, n_steps=n_steps, record_every=record_every,
                                label="BAOAB Langevin")
    return rec.result(integrator="baoab", timestep_ps=float(timestep_ps), record_every=record_every,
                      n_steps=n_steps, temperature_K=float(temperature_K), friction_per_ps=float(friction_per_ps),
                      seed=None if isinstance(seed, np.random.Generator) else int(seed))
