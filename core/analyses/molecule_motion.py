"""Equipartition between the translation of whole molecules and everything else (rotation, vibration).

By the equipartition theorem every quadratic degree of freedom of a canonical system holds kT/2 on
average. The centre-of-mass velocities of the molecules are 3 per molecule of those degrees of freedom
(3 fewer when the total momentum is removed); rotation and internal motion are the rest of N_dof (the
constraints all sit inside molecules). So the "translational" and "rotational-internal" temperatures

    T_trans = 2 K_trans / (k_B (3 N_mol - n_com)),   T_rest = 2 (K - K_trans) / (k_B (N_dof - 3 N_mol + n_com))

agree in a sound run. Per-element groups cannot test this for rigid molecules (a constraint's share of
each atom is not a whole degree of freedom); this split can, and a thermostat or integrator that feeds
translation and rotation unequally shows here.

The split is taken on a sample of frames (every ``stride``-th frame of the audit's pass), so it costs
little beside the pass; its error bar comes from the per-frame difference T_trans - T_rest and its
statistical inefficiency (both from the same frames, so their correlation is kept). Its threshold and
explanation (``temperature.translation``) are registered in :mod:`phasewake.core.analyses.temperature`
beside the equipartition groups'.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.analyses.energy import statistical_inefficiency_of
from phasewake.core.units import KB_KJ_PER_MOL_K


def molecule_labels(topology: Any, n_atoms: int, *, small_residue_atoms: int = 5) -> np.ndarray | None:
    """A molecule number for every atom (0 .. n_mol - 1, in order of first atom), or None when the
    topology cannot tell (no topology, or no bonds and no small residues).

    Atoms joined by bonds are one molecule; so are the atoms of a residue of at most
    ``small_residue_atoms`` atoms (water written without bonds).
    """
    if topology is None or topology.n_atoms != n_atoms or n_atoms == 0:
        return None
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    rows: list[int] = []
    cols: list[int] = []
    for bond in topology.bonds:
        rows.append(int(bond[0].index))
        cols.append(int(bond[1].index))
    small = False
    for res in topology.residues:
        idx = [int(a.index) for a in res.atoms]
        if 2 <= len(idx) <= small_residue_atoms:
            small = True
            rows.extend(idx[:-1])
            cols.extend(idx[1:])
    if not rows and not small:
        return None
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n_atoms, n_atoms))
    _, labels = connected_components(graph, directed=False)
    # renumber in order of each molecule's first atom
    _, first = np.unique(labels, return_index=True)
    rank = np.empty(first.size, np.int64)
    rank[np.argsort(first)] = np.arange(first.size)
    return rank[labels]


class MoleculeMomenta:
    """Translational kinetic energy of all molecules on given frames: the atoms sorted by molecule once,
    then per frame one weighted sum per molecule (``np.add.reduceat``)."""

    def __init__(self, labels: np.ndarray, masses_amu: np.ndarray) -> None:
        m = np.asarray(masses_amu, dtype=np.float64)
        massive = np.flatnonzero(m > 0)  # virtual sites (mass 0) carry no momentum: a molecule of them is none
        self.order = massive[np.argsort(labels[massive], kind="stable")]
        sorted_labels = labels[self.order]
        self.starts = np.flatnonzero(np.concatenate(([True], sorted_labels[1:] != sorted_labels[:-1])))
        self.m_sorted = m[self.order].astype(np.float32)
        self.molecule_mass = np.add.reduceat(m[self.order], self.starts)
        self.n_molecules = int(self.starts.size)

    def kinetic(self, velocities_nm_per_ps: np.ndarray) -> np.ndarray:
        """K_trans per frame (kJ/mol) of velocities shape (frames, n_atoms, 3), nm/ps."""
        mv = velocities_nm_per_ps[:, self.order, :] * self.m_sorted[None, :, None]
        p = np.add.reduceat(mv.astype(np.float64), self.starts, axis=1)  # (frames, n_mol, 3)
        return 0.5 * np.einsum("fmc,fmc,m->f", p, p, 1.0 / self.molecule_mass)


@dataclass(frozen=True)
class TranslationSplit:
    """Translational against rotational-internal temperature (K) over the sampled frames."""

    n_molecules: int
    n_frames: int  # sampled frames
    dof_translation: float
    dof_rest: float
    translation_K: float
    rest_K: float
    difference_K: float  # mean of T_trans - T_rest
    difference_error_K: float
    z_score: float
    relative_difference: float  # difference / mean temperature
    statistical_inefficiency: float


def translation_split(translation_kJ_per_mol: np.ndarray, kinetic_kJ_per_mol: np.ndarray, *, n_molecules: int,
                      n_dof: float, n_com: int) -> TranslationSplit | None:
    """The split of the sampled frames, or None when one side has no degree of freedom or too few frames.

    Parameters
    ----------
    translation_kJ_per_mol, kinetic_kJ_per_mol : ndarray, shape (n,), kJ/mol
        K_trans and the whole kinetic energy on the same frames.
    n_molecules : int
    n_dof : float
        Kinetic degrees of freedom of the whole system (constraints and removed motion taken off).
    n_com : int
        Centre-of-mass degrees of freedom removed (0 or 3): they come off the translation.
    """
    kt = np.asarray(translation_kJ_per_mol, dtype=np.float64)
    k = np.asarray(kinetic_kJ_per_mol, dtype=np.float64)
    dof_t = 3.0 * n_molecules - n_com
    dof_r = float(n_dof) - dof_t
    if kt.size < 4 or dof_t <= 0 or dof_r <= 0:
        return None
    t_trans = 2.0 * kt / (KB_KJ_PER_MOL_K * dof_t)
    t_rest = 2.0 * (k - kt) / (KB_KJ_PER_MOL_K * dof_r)
    diff = t_trans - t_rest
    g, _ = statistical_inefficiency_of(diff)
    err = float(np.std(diff)) * math.sqrt(g / diff.size)
    d = float(diff.mean())
    t_all = float((2.0 * k / (KB_KJ_PER_MOL_K * n_dof)).mean())
    z = d / err if err > 0 else (0.0 if d == 0 else math.inf)
    return TranslationSplit(n_molecules=int(n_molecules), n_frames=int(kt.size), dof_translation=dof_t,
                            dof_rest=dof_r, translation_K=float(t_trans.mean()), rest_K=float(t_rest.mean()),
                            difference_K=d, difference_error_K=err, z_score=float(z),
                            relative_difference=d / t_all if t_all else math.nan, statistical_inefficiency=float(g))
