"""Real engine output: a small OpenMM NVE water run (tests/engine_runs.py). What we read from each file
written from it must equal what OpenMM reported through its own API (State.getPositions, getVelocities,
getKineticEnergy, getPotentialEnergy, getTime; System.getParticleMass, getNumConstraints)."""

import numpy as np
import pytest

from phasewake.core.readers import open_run

pytestmark = pytest.mark.slow


def _frames(run, velocities=True):
    chunks = list(run.frames.iter_chunks(chunk_frames=40, velocities=velocities))
    pos = np.concatenate([c.positions_nm for c in chunks])
    vel = np.concatenate([c.velocities_nm_per_ps for c in chunks]) if velocities else None
    return pos, vel, np.concatenate([c.box_nm for c in chunks])


def test_h5md_equals_openmm(openmm_water_1fs):
    ref = openmm_water_1fs
    run = open_run([ref.paths["h5md"]])
    pos, vel, box = _frames(run)
    # files store float32 (like every MD engine's trajectory): compare at float32 resolution
    np.testing.assert_allclose(pos, ref.positions_nm, rtol=0, atol=np.finfo(np.float32).eps * 8 * np.abs(ref.positions_nm).max())
    np.testing.assert_allclose(vel, ref.velocities_nm_per_ps, rtol=1e-6, atol=1e-6)
    np.testing.assert_array_equal(run.time_ps, ref.time_ps)
    np.testing.assert_array_equal(run.masses_amu, ref.masses_amu)
    np.testing.assert_array_equal(run.energies.by_role("kinetic").values, ref.kinetic_kJ_per_mol)
    np.testing.assert_array_equal(run.energies.by_role("potential").values, ref.potential_kJ_per_mol)
    np.testing.assert_allclose(box[0], ref.box_nm)
    assert run.metadata.n_constraints == ref.n_constraints == 3 * ref.n_waters  # rigid water: 3 per molecule
    assert run.metadata.timestep_ps == pytest.approx(1e-3)
    assert not run.frames.velocities_estimated
    assert run.topology.n_residues == ref.n_waters


def test_mdtraj_hdf5_equals_openmm(openmm_water_1fs):
    ref = openmm_water_1fs
    run = open_run([ref.paths["mdtraj_h5"]])
    pos, vel, box = _frames(run)
    np.testing.assert_allclose(pos, ref.positions_nm, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(vel, ref.velocities_nm_per_ps, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(run.time_ps, ref.time_ps, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(run.energies.by_role("kinetic").values, ref.kinetic_kJ_per_mol, rtol=1e-6)
    np.testing.assert_allclose(run.energies.by_role("potential").values, ref.potential_kJ_per_mol, rtol=1e-6)
    np.testing.assert_allclose(box[-1], ref.box_nm, atol=1e-6)
    # masses come from element data here: OpenMM's force field and mdtraj's element table differ in the
    # 5th digit (O 15.99943 vs 15.9994; from memory), so compare loosely
    np.testing.assert_allclose(run.masses_amu, ref.masses_amu, rtol=1e-4)


def test_dcd_pdb_csv_equals_openmm(openmm_water_1fs):
    ref = openmm_water_1fs
    p = ref.paths
    run = open_run([p["dcd"], p["pdb"], p["csv"]])
    pos, vel, box = _frames(run)
    np.testing.assert_allclose(pos, ref.positions_nm, rtol=1e-6, atol=2e-6)
    # DCD has no clock of its own; the CSV table (one row per frame) supplies OpenMM's times
    np.testing.assert_allclose(run.time_ps, ref.time_ps, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(run.energies.by_role("kinetic").values, ref.kinetic_kJ_per_mol, rtol=1e-9)
    np.testing.assert_allclose(run.energies.by_role("potential").values, ref.potential_kJ_per_mol, rtol=1e-9)
    np.testing.assert_allclose(run.energies.by_role("temperature").values, ref.temperature_K, rtol=1e-9)
    np.testing.assert_allclose(box[0], ref.box_nm, atol=1e-5)
    # no velocities in DCD: estimated by central differences, and said so
    assert run.frames.velocities_estimated
    assert any("estimated by central differences" in w for w in run.warnings)
    # the spacing warning uses the run's own temperature (the table's mean), not an assumed one
    assert any(f"{np.mean(ref.temperature_K):g} K" in w for w in run.warnings)
    # the estimate follows OpenMM's velocities for the heavy atoms (8 fs spacing is short against their
    # motion; the fast hydrogens are smoothed): correlation check, a loose sanity bound (common practice)
    oxygen = np.array([a.element.symbol == "O" for a in run.topology.atoms])
    r = np.corrcoef(vel[1:-1, oxygen].ravel(), ref.velocities_nm_per_ps[1:-1, oxygen].ravel())[0, 1]
    assert r > 0.95
