"""Kinetic temperature, degrees of freedom, constraint inference and equipartition.

References: scipy.stats (gamma, maxwell, kstest), CODATA 2018 k_B, REFERENCES.md §2 (formulas).
"""

import math

import numpy as np
import pytest

from phasewake.core.analyses import temperature as tm
from phasewake.core.errors import AnalysisError
from tests.helpers import random_rotations, water_topology

KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 exact (k_B N_A)


def canonical_velocities(rng, masses, n_frames, temperature):
    """v ~ N(0, kT/m) per component (Maxwell-Boltzmann, REFERENCES.md §2.2)."""
    sd = np.sqrt(KB * temperature / masses)[None, :, None]
    return rng.normal(size=(n_frames, masses.size, 3)) * sd


def test_kinetic_energy_and_temperature_definitions():
    rng = np.random.default_rng(0)
    m = rng.uniform(1, 40, 7)
    v = rng.normal(size=(3, 7, 3))
    k = tm.kinetic_energy(v.astype(np.float32), m)
    np.testing.assert_allclose(k, [0.5 * sum(m[i] * v[f, i] @ v[f, i] for i in range(7)) for f in range(3)],
                               rtol=1e-6)
    # T = 2K / (N_dof k_B) (REFERENCES.md §2); 1 amu nm^2 / ps^2 = 1 kJ/mol
    assert tm.kinetic_temperature(1.0, 2) == pytest.approx(1.0 / KB)
    assert tm.degrees_of_freedom(100, n_constraints=30, n_com=3) == 267
    with pytest.raises(AnalysisError):
        tm.degrees_of_freedom(1, n_constraints=3, n_com=3)


def test_kinetic_energy_follows_gamma_and_fails_at_wrong_temperature():
    # Canonical K ~ scipy.stats.gamma(a = N_dof/2, scale = kT) (REFERENCES.md §2.3, Gibbs 1902).
    rng = np.random.default_rng(1)
    m = np.full(50, 39.948)
    v = canonical_velocities(rng, m, 3000, 120.0)
    k = tm.kinetic_energy(v, m)
    ok = tm.kinetic_energy_distribution_check(k, 150, 120.0)
    assert ok.p_value > 0.01
    assert ok.expected_mean == pytest.approx(150 / 2 * KB * 120.0)
    # relative std of T_kin = sqrt(2 / N_dof) (REFERENCES.md §2.3)
    assert ok.sample_std / ok.sample_mean == pytest.approx(math.sqrt(2 / 150), rel=0.05)
    bad = tm.kinetic_energy_distribution_check(k, 150, 126.0)  # 5 % off
    assert bad.p_value < 1e-3


def test_speeds_follow_maxwell_per_species():
    # scipy.stats.maxwell(scale = sqrt(kT/m)); argon at 94.4 K: mean speed 223.68 m/s (REFERENCES.md §2.2 [C]).
    rng = np.random.default_rng(2)
    m = np.full(400, 39.948)
    v = canonical_velocities(rng, m, 50, 94.4)
    speeds = np.linalg.norm(v, axis=-1).ravel()
    res = tm.maxwell_speed_check(speeds, 39.948, 94.4, name="Ar")
    assert res.p_value > 0.01
    assert res.expected_mean * 1000 == pytest.approx(223.68, abs=0.01)  # nm/ps -> m/s
    assert tm.maxwell_speed_check(speeds, 30.0, 94.4).p_value < 1e-6  # wrong mass is caught


def test_group_dof_with_com_removed_matches_sampled_kinetic_energies():
    # Zero total momentum: <m_i v_i,x^2> = kT (1 - m_i/M) (derivation from the Gaussian conditioned on
    # sum m v = 0), so a group has 3 n_g - 3 M_g / M degrees of freedom.
    rng = np.random.default_rng(3)
    m = np.concatenate([np.full(5, 200.0), np.full(20, 2.0)])  # heavy few, light many: big COM share
    v = canonical_velocities(rng, m, 40000, 300.0)
    p = np.einsum("fai,a->fi", v, m) / m.sum()
    v = v - p[:, None, :]
    groups = {"heavy": np.arange(5), "light": np.arange(5, 25)}
    dof = tm.group_degrees_of_freedom(groups, m, n_com=3)
    assert dof["heavy"] + dof["light"] == pytest.approx(3 * 25 - 3)
    for name, idx in groups.items():
        kg = tm.kinetic_energy(v[:, idx], m[idx]).mean()
        assert kg == pytest.approx(0.5 * dof[name] * KB * 300.0, rel=0.01)


def test_equipartition_flags_hot_group_only_when_significant():
    rng = np.random.default_rng(4)
    m = np.full(200, 16.0)
    v = canonical_velocities(rng, m, 400, 300.0)
    v[:, :50] *= math.sqrt(1.1)  # a "hot solute": 10 % hotter
    groups = {"solute": np.arange(50), "solvent": np.arange(50, 200)}
    dof = tm.group_degrees_of_freedom(groups, m, n_com=0)
    gk = np.stack([tm.kinetic_energy(v[:, i], m[i]) for i in groups.values()], axis=1)
    t_all = tm.kinetic_temperature(tm.kinetic_energy(v, m), 600)
    res = {g.name: g for g in tm.group_temperatures(gk, [dof[k] for k in groups], list(groups), [50, 150], t_all)}
    # expected: solute 330 K, all (50*330 + 150*300)/200 = 307.5 K
    assert res["solute"].mean_K == pytest.approx(330.0, abs=4 * res["solute"].error_K)
    assert res["solute"].significant and res["solute"].relative_difference > 0.05
    v2 = canonical_velocities(rng, m, 400, 300.0)
    gk2 = np.stack([tm.kinetic_energy(v2[:, i], m[i]) for i in groups.values()], axis=1)
    t2 = tm.kinetic_temperature(tm.kinetic_energy(v2, m), 600)
    res2 = tm.group_temperatures(gk2, [dof[k] for k in groups], list(groups), [50, 150], t2)
    assert not any(g.significant for g in res2)


# --- Constraint inference -----------------------------------------------------------------------------


def _waters_and_chains(rng, body, n_w, n_f, n_frames):
    """Frames of n_w rigid waters (``body`` geometry, random orientations and places) then n_f flexible
    six-atom chains, as water_topology(n_w, n_f) orders them."""
    pos = np.empty((n_frames, 3 * n_w + 6 * n_f, 3))
    for f in range(n_frames):
        rot = random_rotations(rng, n_w)
        pos[f, : 3 * n_w] = (np.einsum("wij,aj->wai", rot, body) + rng.uniform(0, 2, (n_w, 1, 3))).reshape(-1, 3)
        chain = np.cumsum(np.concatenate([np.zeros((n_f, 1, 3)),
                                          rng.normal(0, 0.09, (n_f, 5, 3)) + [0.15, 0, 0]], axis=1), axis=1)
        pos[f, 3 * n_w:] = chain.reshape(-1, 3)
    return pos


def test_rigid_water_gives_three_constraints_each_flexible_chain_none():
    # Rigid water: 3 constraints per molecule, N_dof = 3N - 3 n_waters - 3.
    rng = np.random.default_rng(5)
    n_w, n_f, n_frames = 20, 2, 60
    top = water_topology(n_w, n_f)
    body = np.array([[0.0, 0.0, 0.0], [0.09572, 0.0, 0.0], [-0.02399, 0.09266, 0.0]])  # TIP3P geometry
    pos = _waters_and_chains(rng, body, n_w, n_f, n_frames)
    pairs = tm.candidate_pairs(top)
    acc = tm.RigidPairAccumulator(pairs, top.n_atoms)
    acc.update(pos[:25].astype(np.float32))
    acc.update(pos[25:].astype(np.float32))  # streaming over two chunks
    inf = acc.finish()
    assert inf.n_constraints == 3 * n_w
    assert inf.n_rigid_clusters == n_w
    assert inf.smallest_flexible_relative_std > 1e-2


def test_one_unconstrained_start_frame_leaves_rigid_pairs_rigid():
    # A run continued from a .gro start (3 decimals, nm) writes that structure, not yet constrained, as its
    # first frame: its bond lengths are off by up to 5e-4 nm (the rounding), 5e-3 relative for a 0.1 nm
    # bond; the GROMACS SPC/E run in tests/data/engines shows this (frame 0: O-H 0.0988 nm, later 0.1000).
    rng = np.random.default_rng(11)
    n_w, n_f, n_frames = 20, 2, 40
    top = water_topology(n_w, n_f)
    body = np.array([[0.0, 0.0, 0.0], [0.1, 0.0, 0.0], [-0.0333, 0.0943, 0.0]])  # SPC/E geometry
    pos = _waters_and_chains(rng, body, n_w, n_f, n_frames)
    pos[0] = np.round(pos[0], 3)  # the .gro start
    pairs = tm.candidate_pairs(top)
    whole = tm.RigidPairAccumulator(pairs, top.n_atoms)
    whole.update(pos)
    got = whole.finish()
    assert got.n_constraints == 3 * n_w and got.n_rigid_clusters == n_w
    assert got.smallest_flexible_relative_std > 1e-2
    # the plain spread (every frame) would call the waters flexible: the test is not empty
    d = tm.pair_distances(pos, got.rigid_pairs)
    assert (d.std(axis=0) / d.mean(axis=0)).max() > tm.RIGID_RELATIVE_STD
    # streamed in pieces and merged (as over worker processes): the same pairs, the same spreads
    first, later = tm.RigidPairAccumulator(pairs, top.n_atoms), tm.RigidPairAccumulator(pairs, top.n_atoms)
    first.update(pos[:3])
    later.update(pos[3:17])
    later.update(pos[17:])
    first.merge(later)
    merged = first.finish()
    assert merged.rigid_pairs.tolist() == got.rigid_pairs.tolist()
    assert merged.largest_rigid_relative_std == pytest.approx(got.largest_rigid_relative_std, rel=1e-6, abs=1e-12)
    # only one frame is left out: bonds that jump in several frames are not rigid
    pos[5:9, : 3 * n_w] += rng.normal(0, 5e-3, (4, 3 * n_w, 3))
    several = tm.RigidPairAccumulator(pairs, top.n_atoms)
    several.update(pos)
    assert several.finish().n_constraints == 0


def test_constrained_xh_bond_counts_one():
    import mdtraj as md

    rng = np.random.default_rng(6)
    top = md.Topology()
    ch = top.add_chain()
    r = top.add_residue("MOL", ch)
    atoms = [top.add_atom(n, e, r) for n, e in (("C1", md.element.carbon), ("H1", md.element.hydrogen),
                                                 ("C2", md.element.carbon), ("C3", md.element.carbon),
                                                 ("C4", md.element.carbon), ("C5", md.element.carbon))]
    for a, b in ((0, 1), (0, 2), (2, 3), (3, 4), (4, 5)):
        top.add_bond(atoms[a], atoms[b])
    n = 40
    pos = np.cumsum(rng.normal(0, 0.05, (n, 6, 3)) + [0.15, 0, 0], axis=1)
    u = rng.normal(size=(n, 3))
    pos[:, 1] = pos[:, 0] + 0.109 * u / np.linalg.norm(u, axis=1, keepdims=True)  # rigid C-H
    acc = tm.RigidPairAccumulator(tm.candidate_pairs(top), 6)
    acc.update(pos)
    assert acc.finish().n_constraints == 1


def test_default_groups_species_elements_masses_residues_and_solvent():
    import mdtraj as md

    from phasewake.core.analyses.temperature import default_groups
    from phasewake.core.readers.common import topology_from_elements

    # a topology made from elements (one residue per atom): element groups only, not residue duplicates
    top = topology_from_elements(["Ar", "Ar", "Ne", "Ne"])
    assert set(default_groups(top, 4, by_element=True)) == {"element Ar", "element Ne"}
    # no topology: distinct masses, or the file's species when given
    m = np.array([39.948, 39.948, 20.18, 20.18])
    assert set(default_groups(None, 4, by_element=True, masses_amu=m)) == {"mass 39.95 amu", "mass 20.18 amu"}
    assert set(default_groups(None, 4, by_element=True, masses_amu=m, species=[1, 1, 2, 2])) == {"species 1", "species 2"}
    # residues: a solute, water and an ion give residue kinds plus solute against solvent
    t = md.Topology()
    ch = t.add_chain()
    for name, els in (("ALA", ["C", "C", "N"]), ("HOH", ["O", "H", "H"]), ("HOH", ["O", "H", "H"]), ("NA", ["Na"])):
        r = t.add_residue(name, ch)
        for e in els:
            t.add_atom(e, md.element.get_by_symbol(e), r)
    g = default_groups(t, t.n_atoms, by_element=False)
    assert set(g) == {"residue ALA", "residue HOH", "residue NA", "solute", "solvent (water and ions)"}
    np.testing.assert_array_equal(g["solute"], [0, 1, 2])
    np.testing.assert_array_equal(g["solvent (water and ions)"], [3, 4, 5, 6, 7, 8, 9])
