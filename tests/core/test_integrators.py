"""Checks of phasewake.core.model.integrators against analytic results for the harmonic oscillator."""

from __future__ import annotations

import numpy as np
import pytest

from phasewake.core.model.integrators import (
    baoab_step,
    kinetic_energy,
    run_baoab,
    run_velocity_verlet,
    velocity_verlet_step,
)
from phasewake.core.progress import Progress, drive, result_of
from phasewake.core.units import KB_KJ_PER_MOL_K


def harmonic(k: float):
    """U = k/2 |x|^2 per replica (energies summed over atoms and components)."""

    def force(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return -k * x, 0.5 * k * np.einsum("...ij->...", x * x)

    return force


def test_velocity_verlet_conserves_the_shadow_hamiltonian():
    # Tuckerman, Statistical Mechanics: Theory and Molecular Simulation (OUP 2010), eq. 3.13.3:
    # velocity Verlet on x'' = -w^2 x conserves H~ = p^2 / (2m(1 - w^2 dt^2/4)) + m w^2 x^2 / 2 exactly.
    m, k = 2.0, 8.0  # amu, kJ mol^-1 nm^-2: w = 2 / ps
    w = np.sqrt(k / m)
    dt = 0.1 / w
    amplitudes = np.array([0.05, 0.1, 0.3])[:, None, None]  # three walkers, 1 atom, 1 dimension
    n_steps = int(round(50 * 2 * np.pi / (w * dt)))  # 50 periods
    run = result_of(run_velocity_verlet(amplitudes, np.zeros_like(amplitudes), np.array([m]), harmonic(k),
                                        timestep_ps=dt, n_steps=n_steps, record_every=7))
    x = run.positions_nm[..., 0, 0]
    p = m * run.velocities_nm_per_ps[..., 0, 0]
    shadow = p**2 / (2 * m * (1 - w**2 * dt**2 / 4)) + 0.5 * m * w**2 * x**2
    assert np.max(np.abs(shadow / shadow[0] - 1)) < 1e-12
    # the plain energy is not conserved: max |E - E0| = E0 w^2 dt^2 / 4 (follows from H~; REFERENCES.md 1.2)
    e = run.total_kJ_per_mol
    e0 = 0.5 * k * amplitudes[:, 0, 0] ** 2
    assert np.allclose(np.max(np.abs(e - e0), axis=0) / e0, (w * dt) ** 2 / 4, rtol=0.01)


def test_velocity_verlet_energy_error_is_second_order():
    # A second-order symplectic method: the energy fluctuation scales as dt^2 (Hairer, Lubich and Wanner,
    # Geometric Numerical Integration, Springer 2006); halving dt divides std(E) by 4.
    m, k = 1.0, 1.0
    stds = []
    for dt in (0.1, 0.05):
        n = int(round(20 * 2 * np.pi / dt))  # 20 whole periods
        run = result_of(run_velocity_verlet(np.array([[1.0]]), np.array([[0.0]]), np.array([m]), harmonic(k),
                                            timestep_ps=dt, n_steps=n))
        stds.append(np.std(run.total_kJ_per_mol))
    assert stds[0] / stds[1] == pytest.approx(4.0, rel=0.01)


@pytest.mark.slow  # measured 0.5 s of CPU
def test_baoab_harmonic_equipartition():
    # Equipartition (Gibbs 1902): <x^2> = kT/k and <v^2> = kT/m per component. Independent walkers started
    # at rest relax for 15 ps at gamma = 2/ps (the second moments relax at rate gamma: e^-30 of the start
    # left), then give one sample each: n = 3 x 20000 values, so
    # the relative standard error of a mean square is sqrt(2/n) = 0.58%; tolerance 4 sigma = 2.3%.
    # At w dt = 0.1 the known O(dt^2) velocity bias (next test) is 0.25%, well inside it.
    x2, v2, tol = _baoab_harmonic_moments(w_dt=0.1, relax_ps=15.0, friction_per_ps=2.0, seed=11)
    assert x2 == pytest.approx(1.0, abs=tol)
    assert v2 == pytest.approx(1.0, abs=tol)


def _baoab_harmonic_moments(w_dt: float, relax_ps: float, friction_per_ps: float, seed: int):
    """<x^2>/(kT/k) and <v^2>/(kT/m) of 20000 independent 3-D harmonic walkers (m = 2 amu, k = 3 kJ/mol/nm^2,
    300 K) started at rest and run with BAOAB at w dt = ``w_dt`` for ``relax_ps``, one sample each at the end;
    and 4 standard errors of a mean square of n Gaussian values, 4 sqrt(2/n)."""
    m, k, temp = 2.0, 3.0, 300.0
    kt = KB_KJ_PER_MOL_K * temp
    dt = w_dt / np.sqrt(k / m)
    x0 = np.zeros((20000, 1, 3))
    n = int(round(relax_ps / dt))
    run = result_of(run_baoab(x0, np.zeros_like(x0), np.array([m]), harmonic(k), timestep_ps=dt, n_steps=n,
                              temperature_K=temp, friction_per_ps=friction_per_ps, seed=seed, record_every=n))
    x = run.positions_nm[-1]
    v = run.velocities_nm_per_ps[-1]
    return np.mean(x * x) / (kt / k), np.mean(v * v) / (kt / m), 4 * np.sqrt(2 / x.size)


def test_baoab_exact_configurations_at_large_step():
    # Leimkuhler and Matthews (2013), from memory: BAOAB samples the harmonic oscillator's positions
    # exactly at any stable step, <x^2> = kT/k, while full-step velocities follow the velocity-Verlet
    # shadow Hamiltonian (Tuckerman 2010 eq. 3.13.3): <v^2> = (kT/m)(1 - w^2 dt^2/4). At w dt = 1 that is a
    # 25% velocity bias and no position bias. Tolerance as above (4 sigma = 2.3%).
    w_dt = 1.0
    x2, v2, tol = _baoab_harmonic_moments(w_dt=w_dt, relax_ps=30.0, friction_per_ps=1.0, seed=12)
    assert x2 == pytest.approx(1.0, abs=tol)
    assert v2 == pytest.approx(1 - w_dt**2 / 4, abs=tol)


def _anharmonic(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # independent quartic-plus-harmonic wells: U = sum(x^2/2 + x^4/4) (kJ/mol with x in nm)
    return -(x + x**3), np.sum(0.5 * x**2 + 0.25 * x**4, axis=(-2, -1))


@pytest.mark.slow  # measured 0.8 s of CPU
def test_baoab_bath_heat_makes_the_conserved_quantity_flat():
    # Bookkeeping of Sivak, Chodera and Crooks (Phys. Rev. X 3, 011007 (2013), from memory) and of the
    # "effective energy" of Bussi, Donadio and Parrinello (J. Chem. Phys. 126, 014101 (2007)): total energy
    # plus the cumulative heat given to the bath changes only by the integration error of the
    # deterministic B and A parts, so it stays flat while the total energy itself wanders.
    rng = np.random.default_rng(5)
    m = np.full(40, 1.0)
    temp = 1.0 / KB_KJ_PER_MOL_K  # kT = 1 kJ/mol
    x0 = rng.standard_normal((40, 3))
    v0 = rng.standard_normal((40, 3))
    run = result_of(run_baoab(x0, v0, m, _anharmonic, timestep_ps=0.02, n_steps=10000, temperature_K=temp,
                              friction_per_ps=1.0, seed=13, record_every=10))
    sigma_k = np.std(run.kinetic_kJ_per_mol)
    conserved = run.conserved_kJ_per_mol
    total = run.total_kJ_per_mol
    # common practice: fluctuation and net change well below the kinetic-energy fluctuation
    assert np.std(conserved) / sigma_k < 0.01
    assert abs(conserved[-1] - conserved[0]) / sigma_k < 0.01
    # the check can fail: without the heat the total energy moves by about sigma_K (canonical fluctuations)
    assert np.std(total) / sigma_k > 0.5
    # the heat has the right sign: a hot start gives energy to the bath
    hot = result_of(run_baoab(x0, 3 * v0, m, _anharmonic, timestep_ps=0.02, n_steps=500, temperature_K=temp,
                              friction_per_ps=1.0, seed=14, record_every=500))
    assert hot.bath_heat_kJ_per_mol[-1] > 0
    assert hot.total_kJ_per_mol[-1] < hot.total_kJ_per_mol[0]


def test_velocity_verlet_conserves_momentum_and_energy_for_pair_forces():
    # Newton's third law: pair forces conserve total momentum exactly (to round-off) under velocity Verlet.
    rng = np.random.default_rng(3)
    x0 = rng.standard_normal((8, 3))
    v0 = rng.standard_normal((8, 3))
    m = rng.uniform(1, 3, 8)

    def springs(x: np.ndarray) -> tuple[np.ndarray, float]:
        d = x[:, None, :] - x[None, :, :]
        return -np.sum(d, axis=1), 0.25 * float(np.sum(d * d))

    run = result_of(run_velocity_verlet(x0, v0, m, springs, timestep_ps=0.01, n_steps=2000, record_every=100))
    p = np.sum(m[:, None] * run.velocities_nm_per_ps, axis=1)
    assert np.max(np.abs(p - p[0])) < 1e-11
    assert np.std(run.total_kJ_per_mol) / np.std(run.kinetic_kJ_per_mol) < 0.01


def test_steps_match_drivers_and_progress_is_reported():
    m = np.array([1.0, 2.0])
    x = np.array([[0.1, 0.0, 0.0], [0.0, -0.2, 0.1]])
    v = np.array([[0.0, 0.3, 0.0], [0.1, 0.0, 0.0]])
    force = harmonic(2.0)
    f, _ = force(x)
    x1, v1, _, _ = velocity_verlet_step(x, v, f, inv_masses=(1 / m)[:, None], force_fn=force, timestep_ps=0.01)
    run = result_of(run_velocity_verlet(x, v, m, force, timestep_ps=0.01, n_steps=1))
    assert np.array_equal(run.positions_nm[1], x1) and np.array_equal(run.velocities_nm_per_ps[1], v1)
    x2, v2, _, _, q = baoab_step(x, v, f, masses_amu=m, force_fn=force, timestep_ps=0.01, friction_per_ps=2.0,
                                 temperature_K=300.0, rng=np.random.default_rng(1))
    lang = result_of(run_baoab(x, v, m, force, timestep_ps=0.01, n_steps=1, temperature_K=300.0,
                               friction_per_ps=2.0, seed=np.random.default_rng(1)))
    assert np.array_equal(lang.positions_nm[1], x2) and lang.bath_heat_kJ_per_mol[1] == q
    assert kinetic_energy(v, m) == pytest.approx(0.5 * (0.09 + 2 * 0.01))
    records = []
    result = drive(run_baoab(x, v, m, force, timestep_ps=0.01, n_steps=1200, temperature_K=300.0,
                             friction_per_ps=1.0, seed=2, record_every=600), on_progress=records.append)
    assert records and all(isinstance(r, Progress) for r in records)
    assert result.n_frames == 3 and list(result.step) == [0, 600, 1200]
    assert result.seed == 2 and result.integrator == "baoab"


def test_bad_inputs_are_refused():
    force = harmonic(1.0)
    with pytest.raises(ValueError):
        result_of(run_velocity_verlet(np.zeros((2, 3)), np.zeros((3, 3)), np.ones(2), force, timestep_ps=0.01,
                                      n_steps=1))
    with pytest.raises(ValueError):
        result_of(run_velocity_verlet(np.zeros((2, 3)), np.zeros((2, 3)), np.ones(3), force, timestep_ps=0.01,
                                      n_steps=1))
    with pytest.raises(ValueError):
        result_of(run_baoab(np.zeros((2, 3)), np.zeros((2, 3)), np.ones(2), force, timestep_ps=-0.01, n_steps=1,
                            temperature_K=300.0, friction_per_ps=1.0, seed=0))
