"""Translation of whole molecules against rotation and internal motion.

References: the equipartition theorem (each quadratic degree of freedom holds kT/2: a rigid molecule's
centre-of-mass velocity components have variance kT/M, its body-frame angular velocity components
kT/I_k), mdtraj's own ``Topology.find_molecules`` for the molecules of a bonded topology, a plain loop over
molecules for the momenta, and GROMACS's own rigid SPC/E runs (its md.log counts N_dof = 801 for 134
waters: 399 translational + 402 = 3 x 134 rotational degrees of freedom).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.analyses.audit import audit_run
from phasewake.core.analyses.molecule_motion import MoleculeMomenta, molecule_labels, translation_split
from phasewake.core.model.run import RunMetadata
from phasewake.core.progress import result_of
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays
from tests.helpers import random_rotations, water_topology

KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 (R / 1000)
ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs"
BODY = np.array([[0.0, 0.0, 0.0], [0.1, 0.0, 0.0], [-0.0333, 0.0943, 0.0]])  # SPC/E O, H, H (nm)
MASSES = np.array([15.9994, 1.008, 1.008])


def rigid_water_frames(rng: np.random.Generator, n_w: int, n_frames: int, temp: float,
                       translation_scale: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Positions and canonical velocities of rigid waters: V ~ N(0, kT/M), body-frame omega_k ~ N(0, kT/I_k)
    (principal axes), v_i = V + omega x r_i; ``translation_scale`` multiplies V (a run with hot translation)."""
    kt = KB * temp
    com = (MASSES[:, None] * BODY).sum(0) / MASSES.sum()
    b = BODY - com
    inertia = np.einsum("a,ab,ac->bc", MASSES, b, b)
    inertia = np.trace(inertia) * np.eye(3) - inertia
    evals, evecs = np.linalg.eigh(inertia)
    body = b @ evecs  # principal-axis frame
    pos = np.empty((n_frames, 3 * n_w, 3))
    vel = np.empty_like(pos)
    big_m = MASSES.sum()
    for f in range(n_frames):
        rot = random_rotations(rng, n_w)
        centre = rng.uniform(0, 3, (n_w, 1, 3))
        r = np.einsum("wij,aj->wai", rot, body)
        v_com = rng.normal(0, math.sqrt(kt / big_m), (n_w, 1, 3)) * translation_scale
        omega = np.einsum("wij,wj->wi", rot, rng.normal(0, 1, (n_w, 3)) * np.sqrt(kt / evals))
        pos[f] = (centre + r).reshape(-1, 3)
        vel[f] = (v_com + np.cross(omega[:, None, :], r)).reshape(-1, 3)
    return pos.astype(np.float32), vel.astype(np.float32)


def test_molecules_from_bonds_match_mdtraj_and_small_residues_count_without_bonds():
    top = water_topology(5)
    labels = molecule_labels(top, top.n_atoms)
    ref = sorted(sorted(a.index for a in mol) for mol in top.find_molecules())
    got = sorted(sorted(np.flatnonzero(labels == k).tolist()) for k in range(labels.max() + 1))
    assert got == ref
    bare = water_topology(5, bonds=False)  # no bonds: each 3-atom residue is one molecule
    assert molecule_labels(bare, bare.n_atoms).tolist() == np.repeat(np.arange(5), 3).tolist()
    argon = md.Topology()
    ch = argon.add_chain()
    for _ in range(4):
        argon.add_atom("Ar", md.element.argon, argon.add_residue("AR", ch))
    assert molecule_labels(argon, 4) is None  # single atoms, no bonds: no molecules to split


def test_molecule_momenta_against_a_plain_loop():
    rng = np.random.default_rng(3)
    labels = np.array([2, 0, 0, 1, 2, 1, 1, 0])  # molecules not contiguous in atom order
    m = rng.uniform(1, 16, labels.size)
    v = rng.normal(0, 1, (4, labels.size, 3)).astype(np.float32)
    got = MoleculeMomenta(labels, m).kinetic(v)
    ref = [sum(float(np.sum((m[labels == k, None] * v[f, labels == k]).sum(0) ** 2)) / (2 * m[labels == k].sum())
               for k in range(3)) for f in range(4)]
    np.testing.assert_allclose(got, ref, rtol=1e-6)


@pytest.mark.parametrize("scale, level", [(1.0, "ok"), (math.sqrt(1.1), "problem")])
def test_canonical_rigid_water_shares_equally_hot_translation_is_found(scale, level):
    rng = np.random.default_rng(8)
    n_w, n_frames, temp = 60, 120, 300.0
    pos, vel = rigid_water_frames(rng, n_w, n_frames, temp, translation_scale=scale)
    top = water_topology(n_w, bonds=False)
    m = np.tile(MASSES, n_w)
    md_ = RunMetadata(ensemble="NVT", thermostat="test", temperature_K=temp, n_constraints=3 * n_w,
                      com_motion_removed=False)
    run = run_from_arrays(pos, 0.01 * np.arange(n_frames), m, velocities_nm_per_ps=vel, topology=top, metadata=md_)
    res = result_of(audit_run(run))
    tr = res.temperature.translation
    assert tr.dof_translation == 3 * n_w and tr.dof_rest == 3 * n_w  # 6 per rigid molecule, no COM removed
    # equipartition: T_rest = T; T_trans = scale^2 T (each within 4 of its own standard errors, ~1.2 %)
    err = temp * math.sqrt(2 / (3 * n_w * n_frames))
    assert abs(tr.rest_K - temp) < 4 * err
    assert abs(tr.translation_K - scale ** 2 * temp) < 4 * err * scale ** 2
    v = next(x for x in res.verdicts if x.kind == "temperature.translation")
    assert v.level == level, v.message


def test_split_needs_rest_degrees_of_freedom():
    assert translation_split(np.ones(10), np.ones(10), n_molecules=4, n_dof=12, n_com=0) is None  # atoms only
    assert translation_split(np.ones(3), np.full(3, 2.0), n_molecules=4, n_dof=24, n_com=0) is None  # 3 frames


@pytest.mark.parametrize("run_name", ["spce_rigid_nvt_vrescale", "spce_rigid_nve_whole", "spce_flexible_nve_0.5fs"])
def test_gromacs_runs_share_translation_and_rotation(run_name):
    d = ENGINES / run_name
    rep = json.loads((d / "reported.json").read_text())["reported"]
    res = result_of(audit_run(open_run([d / "md.trr", d / "md.edr", d / "md.gro"])))
    tr = res.temperature.translation
    n_w = rep["atoms"] // 3
    assert tr.n_molecules == n_w
    assert tr.dof_translation == 3 * n_w - 3  # comm-mode linear
    assert tr.dof_translation + tr.dof_rest == rep["degrees_of_freedom"]  # md.log nrdf
    v = next(x for x in res.verdicts if x.kind == "temperature.translation")
    assert v.level == "ok", v.message
