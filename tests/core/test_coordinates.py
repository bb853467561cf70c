"""Coordinates, gradients, effective masses and momenta.

Sources named beside each check: mdtraj.compute_distances/angles/dihedrals and mdtraj.rmsd
(reference library); finite differences (numerical analysis); the effective mass
m_eff = [sum_i |grad_i q|^2/m_i]^-1 (Carter, Ciccotti, Hynes and Kapral 1989); the harmonic
oscillator ellipse area 2 pi E/w and arcsine marginal (textbook mechanics, REFERENCES.md 5.6, from
memory; scipy.stats.arcsine for the distribution).
"""

from __future__ import annotations

import mdtraj as md
import numpy as np
import pytest
from scipy import stats

from phasewake.core.analyses.coordinate_choice import default_coordinates
from phasewake.core.analyses.coordinates import (
    compute_coordinates,
    evaluate_arrays,
    value_and_gradient,
)
from phasewake.core.analyses.coordspec import resolve
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking

KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 exact (REFERENCES.md section 9)


def _traj(pos, box=None):
    t = md.Trajectory(np.asarray(pos, dtype=np.float32), None)
    if box is not None:
        t.unitcell_vectors = np.broadcast_to(np.asarray(box, dtype=np.float32), (len(pos), 3, 3)).copy()
    return t


def test_distance_angle_dihedral_match_mdtraj():
    rng = np.random.default_rng(1)
    pos = rng.normal(size=(50, 6, 3)).astype(np.float32)
    t = _traj(pos)
    for spec, ref in [
        ("distance(1, 4)", md.compute_distances(t, [[1, 4]])[:, 0]),
        ("angle(0, 2, 5)", md.compute_angles(t, [[0, 2, 5]])[:, 0]),
        ("dihedral(0, 1, 2, 3)", md.compute_dihedrals(t, [[0, 1, 2, 3]])[:, 0]),
        ("dihedral(5, 3, 1, 4)", md.compute_dihedrals(t, [[5, 3, 1, 4]])[:, 0]),
    ]:
        v, _, _ = evaluate_arrays(resolve(spec, n_atoms=6), pos)
        # mdtraj works in float32 (and arccos for angles, imprecise near 0 and pi)
        np.testing.assert_allclose(v, ref, atol=1e-5, err_msg=spec)


def test_minimum_image_matches_mdtraj_periodic():
    rng = np.random.default_rng(2)
    box = np.diag([2.0, 2.5, 3.0])
    pos = rng.uniform(0, 1, size=(40, 4, 3)) * np.diag(box)
    pos = pos.astype(np.float32)
    t = _traj(pos, box)
    for spec, ref in [
        ("distance(0, 3)", md.compute_distances(t, [[0, 3]], periodic=True)[:, 0]),
        ("angle(0, 1, 2)", md.compute_angles(t, [[0, 1, 2]], periodic=True)[:, 0]),
        ("dihedral(0, 1, 2, 3)", md.compute_dihedrals(t, [[0, 1, 2, 3]], periodic=True)[:, 0]),
    ]:
        v, _, _ = evaluate_arrays(resolve(spec, n_atoms=4), pos, box_nm=box)
        np.testing.assert_allclose(v, ref, atol=5e-6, err_msg=spec)
    # a triclinic box (mdtraj handles general boxes too)
    tri = np.array([[2.0, 0, 0], [0.5, 2.2, 0], [0.3, 0.4, 2.4]])
    pos2 = (rng.uniform(0, 1, size=(40, 4, 3)) @ tri).astype(np.float32)
    ref = md.compute_distances(_traj(pos2, tri), [[0, 3]], periodic=True)[:, 0]
    v, _, _ = evaluate_arrays(resolve("distance(0, 3)", n_atoms=4), pos2, box_nm=tri)
    np.testing.assert_allclose(v, ref, atol=5e-6)


def test_rmsd_matches_mdtraj():
    rng = np.random.default_rng(3)
    ref = rng.normal(size=(8, 3))
    pos = ref[None] + 0.2 * rng.normal(size=(30, 8, 3))
    rot = np.linalg.qr(rng.normal(size=(3, 3)))[0]
    pos = pos @ rot + 1.5
    r = resolve("rg(0-7)", n_atoms=8)
    r = type(r)(spec="rmsd(x)", function="rmsd", label="rmsd", unit="nm", groups=(np.arange(8),),
                reference_nm=ref)
    v, _, _ = evaluate_arrays(r, pos)
    expected = md.rmsd(_traj(pos), _traj(ref[None]), 0)  # mdtraj: unweighted, after optimal fit
    np.testing.assert_allclose(v, expected, atol=1e-5)


@pytest.mark.parametrize("spec", ["x(2)", "z(0)", "distance(0, 3)", "angle(0, 1, 2)", "dihedral(0, 1, 2, 3)",
                                  "dihedral(4, 2, 1, 5)", "com_distance([0, 1], [2-4])", "rg(0-5)", "rmsd"])
def test_gradients_equal_finite_differences(spec):
    rng = np.random.default_rng(4)
    pos = rng.normal(size=(6, 6, 3))
    m = rng.uniform(1, 20, 6)
    if spec == "rmsd":
        base = resolve("rg(0-5)", n_atoms=6)
        r = type(base)(spec="rmsd", function="rmsd", label="rmsd", unit="nm", groups=(np.arange(6),),
                       reference_nm=rng.normal(size=(6, 3)))
    else:
        r = resolve(spec, n_atoms=6)
    box = np.diag([9.0, 9.0, 9.0])
    _v, atoms, grad = value_and_gradient(r, pos, masses_amu=m, box_nm=np.broadcast_to(box, (6, 3, 3)))
    h = 1e-6
    fd = np.zeros_like(grad)
    for k, a in enumerate(atoms):
        for c in range(3):
            p = pos.copy()
            p[:, a, c] += h
            vp, _, _ = value_and_gradient(r, p, masses_amu=m)
            p[:, a, c] -= 2 * h
            vm, _, _ = value_and_gradient(r, p, masses_amu=m)
            fd[:, k, c] = (vp - vm) / (2 * h)  # central differences, error O(h^2)
    np.testing.assert_allclose(grad, fd, atol=1e-7)


def test_effective_masses():
    rng = np.random.default_rng(5)
    pos = rng.normal(size=(10, 5, 3))
    m = np.array([15.999, 1.008, 12.011, 14.007, 32.06])
    _, _, me = evaluate_arrays(resolve("distance(0, 1)", n_atoms=5), pos, masses_amu=m)
    # reduced mass of O-H: 0.948256 u (REFERENCES.md 7.3 [C]) = m_O m_H / (m_O + m_H)
    np.testing.assert_allclose(me, 15.999 * 1.008 / (15.999 + 1.008), rtol=1e-12)
    np.testing.assert_allclose(me, 0.948256, atol=1e-6)
    _, _, me = evaluate_arrays(resolve("x(3)", n_atoms=5), pos, masses_amu=m)
    np.testing.assert_allclose(me, 14.007)
    # centres of mass: the reduced mass of the two group masses (derivation from 7.3)
    _, _, me = evaluate_arrays(resolve("com_distance([0, 1], [2-4])", n_atoms=5), pos, masses_amu=m)
    ma, mb = m[:2].sum(), m[2:].sum()
    np.testing.assert_allclose(me, ma * mb / (ma + mb), rtol=1e-12)
    # mass-weighted radius of gyration: grad_i = m_i (r_i - R)/(M Rg) gives m_eff = M (derivation)
    _, _, me = evaluate_arrays(resolve("rg(0-4)", n_atoms=5), pos, masses_amu=m)
    np.testing.assert_allclose(me, m.sum(), rtol=1e-12)


def test_canonical_velocity_identity():
    """<(dq/dt)^2> = kT <1/m_eff>.

    Derivation: canonical velocities are Gaussian, independent of positions, <v_ia v_jb> =
    delta_ij delta_ab kT/m_i. For fixed x, dq/dt = sum_i g_i . v_i has variance sum_i |g_i|^2 kT/m_i
    = kT/m_eff(x); averaging over configurations gives the identity (REFERENCES.md 7.3).
    """
    rng = np.random.default_rng(6)
    n = 100_000
    m = np.array([12.011, 1.008, 15.999, 14.007])
    kt = KB * 300.0
    pos = rng.normal(size=(n, 4, 3)) * 0.1 + np.array([[0, 0, 0], [0.1, 0, 0], [0.1, 0.12, 0], [0.2, 0.1, 0.1]])
    vel = rng.normal(size=(n, 4, 3)) * np.sqrt(kt / m)[None, :, None]
    for spec in ["angle(0, 1, 2)", "dihedral(0, 1, 2, 3)", "distance(0, 3)"]:
        _, dq, me = evaluate_arrays(resolve(spec, n_atoms=4), pos, vel, m)
        mask = np.isfinite(dq) & np.isfinite(me)
        lhs = np.mean(dq[mask] ** 2)
        rhs = kt * np.mean(1.0 / me[mask])
        # dq^2/rhs is a chi^2_1-like mixture; 5 standard errors of the mean
        se = np.std(dq[mask] ** 2) / np.sqrt(mask.sum())
        assert abs(lhs - rhs) < 5 * se, (spec, lhs, rhs, se)


def _velocity_verlet_ho(*, m, w, x0, v0, dt, n_steps):
    """1D harmonic oscillator by velocity Verlet (vectorised over nothing: 1 particle; cheap)."""
    x = np.empty(n_steps + 1)
    v = np.empty(n_steps + 1)
    x[0], v[0] = x0, v0
    a = -w * w * x0
    for i in range(n_steps):
        vh = v[i] + 0.5 * dt * a
        x[i + 1] = x[i] + dt * vh
        a = -w * w * x[i + 1]
        v[i + 1] = vh + 0.5 * dt * a
    return x, v


def test_harmonic_oscillator_phase_portrait_area_and_arcsine_marginal():
    m, w = 2.0, 1.3
    E = 0.5
    x0 = np.sqrt(2 * E / (m * w * w))
    dt = 0.001
    period = 2 * np.pi / w
    n_steps = int(round(period / dt))
    x, v = _velocity_verlet_ho(m=m, w=w, x0=x0, v0=0.0, dt=dt, n_steps=n_steps)
    pos = np.zeros((x.size, 1, 3))
    pos[:, 0, 0] = x
    vel = np.zeros_like(pos)
    vel[:, 0, 0] = v
    run = run_from_arrays(pos, np.arange(x.size) * dt, np.array([m]), velocities_nm_per_ps=vel)
    with chunking(frames=1000):
        (s,) = result_of(compute_coordinates(run, ["x(0)"]))
    assert s.momentum_unit == "amu nm/ps" and not s.velocities_estimated
    np.testing.assert_allclose(s.m_eff, m)
    q, p = s.values, s.momentum
    area = 0.5 * abs(np.dot(q, np.roll(p, -1)) - np.dot(p, np.roll(q, -1)))  # shoelace formula
    assert abs(area / (2 * np.pi * E / w) - 1) < 1e-3  # area = 2 pi E / w (REFERENCES.md 5.6)

    # marginal of x over many periods, sampled at a step incommensurate with the period: arcsine
    n_long = 60_000
    xl, _ = _velocity_verlet_ho(m=m, w=w, x0=x0, v0=0.0, dt=0.0173, n_steps=n_long)
    xmax = np.max(np.abs(xl))
    ks = stats.kstest(xl, stats.arcsine(loc=-xmax, scale=2 * xmax).cdf)
    assert ks.pvalue > 0.01
    # and a Gaussian of the same variance is rejected: the NVE oscillator is not canonical
    assert stats.kstest(xl, stats.norm(scale=np.std(xl)).cdf).pvalue < 1e-6


def test_streaming_equals_whole_arrays_and_pbc():
    rng = np.random.default_rng(7)
    n, na = 257, 7
    box = np.diag([1.5, 1.5, 1.5])
    pos = (rng.uniform(0, 1.5, size=(n, na, 3))).astype(np.float32)
    vel = rng.normal(size=(n, na, 3)).astype(np.float32)
    m = rng.uniform(1, 40, na)
    specs = ["distance(0, 6)", "angle(1, 2, 3)", "dihedral(0, 2, 4, 6)", "com_distance([0-2], [4, 5])", "y(5)"]
    run = run_from_arrays(pos, np.arange(n) * 0.01, m, velocities_nm_per_ps=vel, box_nm=box)
    with chunking(frames=10):
        series = result_of(compute_coordinates(run, specs))
    for spec, s in zip(specs, series, strict=True):
        v, dq, me = evaluate_arrays(resolve(spec, n_atoms=na), pos, vel, m, box)
        np.testing.assert_allclose(s.values, v, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(s.velocity, dq, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(s.momentum, me * dq, rtol=1e-12, atol=1e-12)
    t = _traj(pos, box)
    np.testing.assert_allclose(series[0].values, md.compute_distances(t, [[0, 6]], periodic=True)[:, 0], atol=5e-6)
    assert series[2].periodic and series[2].unit == "rad" and series[1].m_eff_unit == "amu nm^2/rad^2"
    # a range of frames
    with chunking(frames=16):
        part = result_of(compute_coordinates(run, ["distance(0, 6)"], start=100, stop=150))[0]
    np.testing.assert_allclose(part.values, series[0].values[100:150])
    np.testing.assert_allclose(part.time_ps, np.arange(100, 150) * 0.01)


def test_without_velocities_dqdt_is_estimated():
    t = np.arange(2000) * 0.005
    pos = np.zeros((t.size, 2, 3))
    pos[:, 1, 0] = 1.0 + 0.1 * np.sin(2.0 * t)
    run = run_from_arrays(pos, t, np.array([4.0, 4.0]))
    (s,) = result_of(compute_coordinates(run, ["distance(0, 1)"]))
    assert s.velocities_estimated
    # analytic dq/dt = 0.2 cos(2t); central differences: O(dt^2) plus float32 rounding / dt
    np.testing.assert_allclose(s.velocity[1:-1], 0.2 * np.cos(2.0 * t[1:-1]), atol=5e-5)  # float32 positions
    np.testing.assert_allclose(s.m_eff, 2.0, rtol=1e-6)


def test_default_coordinates():
    top = md.Topology()
    chain = top.add_chain()
    for _k in range(12):
        r = top.add_residue("AR", chain)
        top.add_atom("AR", md.element.argon, r)
    dim = top.add_residue("DIM", chain)
    a = top.add_atom("D1", md.element.argon, dim)
    b = top.add_atom("D2", md.element.argon, dim)
    top.add_bond(a, b)
    run = run_from_arrays(np.zeros((2, 14, 3)), np.arange(2.0), np.full(14, 39.9), topology=top)
    assert default_coordinates(run) == ["distance(12, 13)"]
    run = run_from_arrays(np.zeros((2, 3, 3)), np.arange(2.0), np.ones(3))
    assert default_coordinates(run) == ["distance(0, 1)"]
    spec = default_coordinates(run)[0]
    assert resolve(spec, n_atoms=3).function == "distance"


SAMPLES = __import__("pathlib").Path(__file__).resolve().parents[2] / "sample_data"


@pytest.mark.skipif(not (SAMPLES / "dimer_langevin.h5md").exists(), reason="sample runs not generated")
def test_sample_dimer_bond_against_mdtraj_and_equipartition():
    from phasewake.app.common import quiet_stdout
    from phasewake.core.readers import open_run

    run = open_run([SAMPLES / "dimer_nve.h5md"])
    (s,) = result_of(compute_coordinates(run, ['distance("name D1", "name D2")']))
    with quiet_stdout():
        traj = md.load(str(SAMPLES / "dimer_nve.dcd"), top=str(SAMPLES / "dimer_nve.pdb"))
    # mdtraj on the DCD copy of the same run (DCD stores Angstrom in float32)
    np.testing.assert_allclose(s.values, md.compute_distances(traj, [[0, 1]], periodic=True)[:, 0], atol=2e-5)

    lang = open_run([SAMPLES / "dimer_langevin.h5md"])
    (b,) = result_of(compute_coordinates(lang, ["distance(0, 1)"]))
    kt = KB * 120.0  # the bath temperature of the sample (sample_data/README.md)
    np.testing.assert_allclose(b.m_eff, 39.948 / 2, rtol=1e-9)  # reduced mass of two argon-mass atoms
    # <(dq/dt)^2> = kT <1/m_eff> (REFERENCES.md 7.3); 1600 correlated frames: allow 20% (~3 sigma)
    assert abs(np.mean(b.velocity**2) / (kt / 19.974) - 1) < 0.2
