"""Kinetic temperature, degrees of freedom, constraint inference, equipartition and canonical checks.

Pure array kernels plus small streaming accumulators (``update`` per frame chunk, then ``finish``);
:func:`phasewake.core.analyses.audit.audit_run` drives them over a Run.

Units: velocities nm/ps, masses amu, kinetic energy kJ/mol (1 amu nm^2/ps^2 = 1 kJ/mol), T in K.

T_kin = 2 K / (N_dof k_B) with N_dof = 3 N - N_constraints - N_com (common practice).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses.energy import statistical_inefficiency_of
from phasewake.core.analyses.verdicts import Explanation, Threshold, register
from phasewake.core.errors import AnalysisError
from phasewake.core.units import KB_KJ_PER_MOL_K

register(
    Threshold("temperature.file_mismatch", caution=0.005, problem=0.02, unit="",
              source="common practice (relative difference of mean temperatures)",
              description="|mean T from velocities - mean T in the file| / mean T in the file"),
    Explanation(
        title="Temperature in the file against the kinetic temperature",
        what="Whether the temperature the engine wrote agrees with the one computed here from the "
             "velocities (or the file's kinetic energy) and the degrees of freedom counted here.",
        method="Mean of both series over frames present in both; the ratio also gives the number of "
               "degrees of freedom the engine must have used (N_dof * T_here / T_file).",
        threshold="0.5% caution, 2% problem: common practice. Leapfrog-type integrators store "
                  "velocities half a step off (about 0.6% per frame seen on a real water run), so small "
                  "differences of single frames are expected.",
        advice="A constant ratio means a different count of constraints or of removed centre-of-mass "
               "motion: give --constraints N, or check which velocities (half-step or on-step) were "
               "written.",
    ),
)
register(
    Threshold("temperature.equipartition", caution=0.02, problem=0.05, unit="",
              source="common practice (relative temperature difference of a group; only when "
                     "significant at 3 sigma)",
              description="largest |T_group - T| / T over groups whose difference is significant"),
    Explanation(
        title="Equipartition between groups",
        what="Whether every group of atoms (molecule type, element, user group) has the same kinetic "
             "temperature, as equipartition demands (Gibbs 1902): e.g. 'hot solvent, cold solute'.",
        method="Per-frame group temperature 2 K_g / (N_dof,g k_B) with N_dof,g = 3 n_g - c_g - N_com "
               "M_g / M (constraints across groups split half/half; common practice); the error of the "
               "difference to the whole system is its standard deviation times sqrt(g / n).",
        threshold="2% caution, 5% problem, and only for differences beyond 3 standard errors: common "
                  "practice.",
        advice="Check the thermostat coupling (separate coupling groups, too weak coupling), removed "
               "centre-of-mass motion per group, or a too-large time step with stiff solute bonds.",
    ),
)
register(
    Threshold("temperature.kinetic_distribution", caution=0.01, problem=0.001, unit="p-value",
              source="common practice (Kolmogorov-Smirnov p-value on decorrelated samples)",
              higher_is_worse=False,
              description="KS p-value of the kinetic energy against Gamma(N_dof/2, scale kT)"),
    Explanation(
        title="Kinetic-energy distribution (canonical runs)",
        what="In the canonical ensemble the total kinetic energy follows a gamma distribution with shape "
             "N_dof/2 and scale kT (Gibbs 1902); a thermostat that fixes the mean but not the spread "
             "(e.g. Berendsen) fails this.",
        method="Kolmogorov-Smirnov test (scipy.stats.kstest) of kinetic energies taken every g frames "
               "against scipy.stats.gamma(N_dof/2, scale=kT), kT from the target temperature. Not "
               "applied to NVE runs, where K is narrower because E is fixed.",
        threshold="p < 0.01 caution, p < 0.001 problem: common practice.",
        advice="Use a thermostat that samples the canonical ensemble (Langevin, stochastic velocity "
               "rescaling, Nose-Hoover chains) and check the degrees of freedom.",
    ),
)
register(
    Threshold("temperature.maxwell", caution=0.01, problem=0.001, unit="p-value",
              source="common practice (Kolmogorov-Smirnov p-value, Bonferroni-corrected over species)",
              higher_is_worse=False,
              description="smallest Bonferroni-corrected KS p-value of speeds against Maxwell-Boltzmann"),
    Explanation(
        title="Maxwell-Boltzmann speeds per species (canonical runs)",
        what="Whether the speeds of each species follow the Maxwell-Boltzmann distribution at the target "
             "temperature.",
        method="KS test of the speeds of unconstrained atoms of one species from frames g apart against "
               "scipy.stats.maxwell(scale=sqrt(kT/m)); p-values multiplied by the number of species "
               "(Bonferroni). Constrained atoms are left out (their speeds are not Maxwellian in m_i).",
        threshold="p < 0.01 caution, p < 0.001 problem: common practice.",
        advice="A failing species points at a thermostat that does not reach it, or wrong masses.",
    ),
)

register(
    Threshold("temperature.translation", caution=0.02, problem=0.05, unit="",
              source="common practice (relative difference of the translational and the rotational-internal "
                     "temperature; judged only when significant at 3 sigma), as for the equipartition groups",
              description="|T_trans - T_rest| / T over the sampled frames"),
    Explanation(
        title="Translation against rotation",
        what="Whether the kinetic energy is shared equally between the translation of whole molecules and "
             "their rotation and internal motion (equipartition theorem).",
        method="Molecules from the topology's bonds (atoms of a small residue without bonds count as one "
               "molecule). On every k-th frame: K_trans = sum over molecules of |P|^2 / 2M with P the "
               "molecule's momentum; T_trans = 2 K_trans / (k_B (3 N_mol - n_com)), T_rest from the rest of "
               "the kinetic energy and of N_dof. The error is that of the mean per-frame difference, "
               "inflated by its statistical inefficiency.",
        threshold="A relative difference above 0.02 is a caution, above 0.05 a problem, only when the "
                  "difference is beyond 3 sigma: common practice, as for the equipartition groups.",
        advice="A thermostat acting on atoms should heat both alike; a gap points at a thermostat or "
               "integrator setting (too weak coupling to a part, a removed motion counted as present), or a "
               "run not yet equilibrated. Check the degrees of freedom the engine counts (constraints, "
               "centre-of-mass removal) first: a wrong count shifts T_rest.",
    ),
)

RIGID_RELATIVE_STD = 1e-3  # a pair distance fluctuating less than this (relative) is held rigid


def kinetic_energy(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray) -> np.ndarray:
    """K = sum_i m_i v_i^2 / 2 per frame.

    Parameters
    ----------
    velocities_nm_per_ps : ndarray, shape (n_frames, n_atoms, 3), nm/ps
    masses_amu : ndarray, shape (n_atoms,), amu

    Returns
    -------
    ndarray, shape (n_frames,), kJ/mol (accumulated in float64)
    """
    v = np.asarray(velocities_nm_per_ps)
    m = np.asarray(masses_amu, dtype=np.float64)
    v2 = np.einsum("fai,fai->fa", v, v, dtype=np.float64)
    return 0.5 * (v2 @ m)


def com_kinetic_energy(velocities_nm_per_ps: np.ndarray, masses_amu: np.ndarray) -> np.ndarray:
    """Kinetic energy of the centre-of-mass motion, |sum m v|^2 / (2 M), shape (n_frames,), kJ/mol."""
    m = np.asarray(masses_amu, dtype=np.float64)
    p = np.einsum("fai,a->fi", np.asarray(velocities_nm_per_ps), m, dtype=np.float64)
    return np.einsum("fi,fi->f", p, p) / (2.0 * float(m.sum()))


def degrees_of_freedom(n_atoms: int, *, n_constraints: int = 0, n_com: int = 3, dims: int = 3) -> int:
    """N_dof = dims * n_atoms - n_constraints - n_com (common practice, also for n_com)."""
    n = dims * n_atoms - n_constraints - n_com
    if n <= 0:
        raise AnalysisError(f"{n_atoms} atoms with {n_constraints} constraints and {n_com} removed "
                            f"centre-of-mass degrees of freedom leave {n} degrees of freedom")
    return n


def kinetic_temperature(kinetic_kJ_per_mol: np.ndarray | float, n_dof: float) -> np.ndarray:
    """T = 2 K / (N_dof k_B), in K; k_B = 0.00831446261815324 kJ/mol/K (CODATA 2018).

    One multiplication by 2 / (N_dof k_B) (a single pass over long series; within 1 ulp of 2 K / (N_dof k_B)).
    """
    return np.asarray(kinetic_kJ_per_mol, dtype=np.float64) * (2.0 / (n_dof * KB_KJ_PER_MOL_K))


# ---------------------------------------------------------------------------------------------------
# Constraint inference from rigid pair distances
# ---------------------------------------------------------------------------------------------------


def candidate_pairs(topology: Any, *, small_residue_atoms: int = 5, exclude: np.ndarray | None = None) -> np.ndarray:
    """Atom pairs whose distance could be constrained.

    Topology bonds, pairs of atoms bonded to a common atom (they make a rigid triangle in rigid water
    and other rigid molecules), and every pair inside residues of at most ``small_residue_atoms``
    atoms (water written without bonds); none with an ``exclude`` atom (virtual sites: placed from other
    atoms, so rigid with them without being constrained).

    Returns
    -------
    ndarray, shape (n_pairs, 2), int64, sorted rows, unique
    """
    pairs: set[tuple[int, int]] = set()
    neighbours: dict[int, list[int]] = {}
    for bond in topology.bonds:
        a, b = int(bond[0].index), int(bond[1].index)
        if a == b:
            continue
        pairs.add((min(a, b), max(a, b)))
        neighbours.setdefault(a, []).append(b)
        neighbours.setdefault(b, []).append(a)
    for nb in neighbours.values():
        for i in range(len(nb)):
            for j in range(i + 1, len(nb)):
                a, b = nb[i], nb[j]
                pairs.add((min(a, b), max(a, b)))
    for res in topology.residues:
        idx = [int(at.index) for at in res.atoms]
        if 2 <= len(idx) <= small_residue_atoms:
            for i in range(len(idx)):
                for j in range(i + 1, len(idx)):
                    pairs.add((min(idx[i], idx[j]), max(idx[i], idx[j])))
    if exclude is not None and len(exclude):  # virtual sites: placed from other atoms, not constrained
        gone = {int(i) for i in exclude}
        pairs = {p for p in pairs if p[0] not in gone and p[1] not in gone}
    if not pairs:
        return np.zeros((0, 2), dtype=np.int64)
    return np.array(sorted(pairs), dtype=np.int64)


def pair_distances(positions_nm: np.ndarray, pairs: np.ndarray, box_nm: np.ndarray | None = None) -> np.ndarray:
    """Distances of atom pairs per frame, minimum image along the box diagonal when a box is given.

    Parameters
    ----------
    positions_nm : ndarray, shape (n_frames, n_atoms, 3), nm
    pairs : ndarray, shape (n_pairs, 2), int
    box_nm : ndarray, shape (n_frames, 3, 3), nm, optional

    Returns
    -------
    ndarray, shape (n_frames, n_pairs), nm, float64
    """
    x = np.asarray(positions_nm, dtype=np.float64)
    d = x[:, pairs[:, 1]] - x[:, pairs[:, 0]]
    if box_nm is not None:
        lengths = np.einsum("fii->fi", np.asarray(box_nm, dtype=np.float64))[:, None, :]
        with np.errstate(divide="ignore", invalid="ignore"):
            shift = np.where(lengths > 0, np.round(d / np.where(lengths > 0, lengths, 1.0)), 0.0)
        d = d - shift * lengths
    return np.sqrt(np.einsum("fpi,fpi->fp", d, d))


@dataclass(frozen=True)
class ConstraintInference:
    """Constraints inferred from pair distances that do not fluctuate."""

    n_constraints: int
    n_candidate_pairs: int
    n_rigid_pairs: int
    n_rigid_clusters: int
    n_frames_used: int
    rigid_relative_std: float  # the criterion used
    rigid_pairs: np.ndarray  # shape (n_rigid_pairs, 2)
    constraint_weights: np.ndarray  # shape (n_rigid_pairs,), constraints each rigid pair stands for
    largest_rigid_relative_std: float | None  # among rigid pairs
    smallest_flexible_relative_std: float | None  # among candidate pairs not rigid
    settings: dict[str, Any] = field(default_factory=dict)


class RigidPairAccumulator:
    """Streaming mean/variance of candidate pair distances; ``finish`` counts the constraints.

    A rigid cluster (atoms joined by rigid pairs) of n atoms holds min(rigid pairs, 3n - 6) constraints
    (1 for n = 2): a rigid triangle (water) holds 3, a rigid X-H bond 1.

    One frame may be off: a run continued from a structure file of lower precision (a .gro or .pdb
    start, GROMACS ``continuation = yes``) writes that structure as its first frame, before the first
    constraint step; its water O-H lengths are off by ~1e-3 nm. So from 4 frames on, each pair's spread
    is taken without its most extreme frame (the smaller of the spreads without the lowest and without
    the highest distance, from the running minimum and maximum: still one pass, still mergeable). A
    flexible bond fluctuates in every frame and stays flexible.
    """

    def __init__(self, pairs: np.ndarray, n_atoms: int, *, max_frames: int = 500,
                 rigid_relative_std: float = RIGID_RELATIVE_STD) -> None:
        self.pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
        self.n_atoms = n_atoms
        self.max_frames = max_frames
        self.rigid_relative_std = rigid_relative_std
        self._n = 0
        self._sum = np.zeros(self.pairs.shape[0])
        self._sum2 = np.zeros(self.pairs.shape[0])
        self._lo = np.full(self.pairs.shape[0], np.inf)  # extremes of the shifted distances
        self._hi = np.full(self.pairs.shape[0], -np.inf)
        self._shift: np.ndarray | None = None  # first frame's distances, for a stable variance

    @property
    def full(self) -> bool:
        return self._n >= self.max_frames

    def update(self, positions_nm: np.ndarray, box_nm: np.ndarray | None = None) -> None:
        if self.pairs.shape[0] == 0 or self.full:
            return
        take = self.max_frames - self._n
        pos = positions_nm[:take]
        d = pair_distances(pos, self.pairs, None if box_nm is None else box_nm[:take])
        if self._shift is None:
            self._shift = d[0].copy()
        dd = d - self._shift
        self._sum += dd.sum(axis=0)
        self._sum2 += (dd * dd).sum(axis=0)
        np.minimum(self._lo, dd.min(axis=0), out=self._lo)
        np.maximum(self._hi, dd.max(axis=0), out=self._hi)
        self._n += d.shape[0]

    def merge(self, later: RigidPairAccumulator) -> None:
        """Add the statistics of an accumulator of the same pairs fed later frames (its sums move to this
        one's reference distances: sum (d - s1) = sum (d - s2) + n2 (s2 - s1), and likewise the squares)."""
        if later._n == 0 or later._shift is None:
            return
        if self._shift is None:
            self._shift, self._sum, self._sum2 = later._shift.copy(), later._sum.copy(), later._sum2.copy()
            self._lo, self._hi = later._lo.copy(), later._hi.copy()
            self._n = later._n
            return
        d = later._shift - self._shift
        self._sum2 += later._sum2 + 2.0 * d * later._sum + later._n * d * d
        self._sum += later._sum + later._n * d
        np.minimum(self._lo, later._lo + d, out=self._lo)
        np.maximum(self._hi, later._hi + d, out=self._hi)
        self._n += later._n

    def _relative_spread(self) -> tuple[np.ndarray, np.ndarray]:
        """(mean distance, relative standard deviation) of each pair; from 4 frames on without the pair's
        most extreme frame (see the class)."""
        assert self._shift is not None
        n = self._n
        mean = self._sum / n
        var = np.maximum(self._sum2 / n - mean ** 2, 0.0)
        if n >= 4:
            for x in (self._lo, self._hi):
                m1 = (self._sum - x) / (n - 1)
                var = np.minimum(var, np.maximum((self._sum2 - x * x) / (n - 1) - m1 ** 2, 0.0))
        mean_d = self._shift + mean
        return mean_d, np.sqrt(var) / np.where(mean_d > 0, mean_d, np.inf)

    def finish(self) -> ConstraintInference:
        n = self._n
        if self.pairs.shape[0] == 0 or n < 2 or self._shift is None:
            return ConstraintInference(0, int(self.pairs.shape[0]), 0, 0, n, self.rigid_relative_std,
                                       np.zeros((0, 2), np.int64), np.zeros(0), None, None,
                                       {"max_frames": self.max_frames})
        _, rel = self._relative_spread()
        rigid = rel < self.rigid_relative_std
        rp = self.pairs[rigid]
        # connected clusters of the rigid-pair graph (union-find over atoms)
        parent = np.arange(self.n_atoms)

        def root(i: int) -> int:
            while parent[i] != i:
                parent[i] = parent[parent[i]]
                i = int(parent[i])
            return i

        for a, b in rp:
            ra, rb = root(int(a)), root(int(b))
            if ra != rb:
                parent[ra] = rb
        roots = np.array([root(int(a)) for a in rp[:, 0]], dtype=np.int64) if rp.size else np.zeros(0, np.int64)
        weights = np.zeros(rp.shape[0])
        total = 0
        n_clusters = 0
        if rp.size:
            atoms_of: dict[int, set[int]] = {}
            for (a, b), r in zip(rp, roots, strict=True):
                atoms_of.setdefault(int(r), set()).update((int(a), int(b)))
            for r, atoms in atoms_of.items():
                sel = roots == r
                n_pairs = int(sel.sum())
                na = len(atoms)
                cap = 1 if na == 2 else 3 * na - 6
                c = min(n_pairs, cap)
                weights[sel] = c / n_pairs
                total += c
                n_clusters += 1
        return ConstraintInference(
            n_constraints=int(total), n_candidate_pairs=int(self.pairs.shape[0]), n_rigid_pairs=int(rp.shape[0]),
            n_rigid_clusters=n_clusters, n_frames_used=n, rigid_relative_std=self.rigid_relative_std,
            rigid_pairs=rp, constraint_weights=weights,
            largest_rigid_relative_std=float(rel[rigid].max()) if rigid.any() else None,
            smallest_flexible_relative_std=float(rel[~rigid].min()) if (~rigid).any() else None,
            settings={"max_frames": self.max_frames, "rigid_relative_std": self.rigid_relative_std,
                      "spread": "without each pair's most extreme frame (from 4 frames on)"},
        )


# ---------------------------------------------------------------------------------------------------
# Equipartition per group
# ---------------------------------------------------------------------------------------------------


def group_degrees_of_freedom(
    groups: Mapping[str, np.ndarray],
    masses_amu: np.ndarray,
    *,
    n_com: int = 3,
    constraint_pairs: np.ndarray | None = None,
    constraint_weights: np.ndarray | None = None,
    n_constraints: int = 0,
) -> dict[str, float]:
    """N_dof of each group: 3 n_g - c_g - n_com M_g / M.

    The centre-of-mass share M_g/M follows from the zero-total-momentum constraint: with it,
    <m_i v_i,x^2> = kT (1 - m_i / M) for independent Gaussian momenta (derivation). Constraints are
    split half/half between the atoms of each constrained pair (common practice). Without pair
    information, ``n_constraints`` is shared in proportion to atom counts (approximate).

    Parameters
    ----------
    groups : mapping name -> ndarray of atom indices
    masses_amu : ndarray, shape (n_atoms,)
    constraint_pairs : ndarray, shape (n_pairs, 2), optional
    constraint_weights : ndarray, shape (n_pairs,), optional
        Constraints each pair stands for (scaled so they sum to ``n_constraints`` when that is larger
        than zero and differs).
    """
    m = np.asarray(masses_amu, dtype=np.float64)
    n_atoms = m.shape[0]
    per_atom = np.zeros(n_atoms)
    if constraint_pairs is not None and constraint_pairs.size and n_constraints > 0:
        w = np.ones(constraint_pairs.shape[0]) if constraint_weights is None else np.asarray(constraint_weights, float)
        w = w * (n_constraints / w.sum())
        np.add.at(per_atom, constraint_pairs[:, 0], 0.5 * w)
        np.add.at(per_atom, constraint_pairs[:, 1], 0.5 * w)
    elif n_constraints > 0:
        massive = m != 0.0
        per_atom[massive] = n_constraints / max(int(massive.sum()), 1)
    mtot = float(m.sum())
    out: dict[str, float] = {}
    for name, idx in groups.items():
        idx = np.asarray(idx, dtype=np.int64)
        n_massive = int(np.count_nonzero(m[idx] != 0.0))  # virtual sites (mass 0) have no degree of freedom
        out[name] = 3.0 * n_massive - float(per_atom[idx].sum()) - n_com * float(m[idx].sum()) / mtot
    return out


@dataclass(frozen=True)
class GroupTemperature:
    name: str
    n_atoms: int
    n_dof: float
    mean_K: float
    error_K: float  # standard error of the mean, sqrt(g/n) corrected
    difference_K: float  # mean(T_group - T_all)
    difference_error_K: float
    z_score: float
    relative_difference: float  # difference / mean T_all
    significant: bool
    statistical_inefficiency: float


def group_temperatures(
    group_kinetic_kJ_per_mol: np.ndarray,
    group_dof: Sequence[float],
    names: Sequence[str],
    group_sizes: Sequence[int],
    total_temperature_K: np.ndarray,
    *,
    significance_z: float = 3.0,
) -> tuple[GroupTemperature, ...]:
    """Temperatures of groups with statistical errors and their difference to the whole system.

    Parameters
    ----------
    group_kinetic_kJ_per_mol : ndarray, shape (n_frames, n_groups), kJ/mol
    group_dof : sequence of float, length n_groups
    names, group_sizes : sequences, length n_groups
    total_temperature_K : ndarray, shape (n_frames,), K
    """
    kg = np.asarray(group_kinetic_kJ_per_mol, dtype=np.float64)
    tall = np.asarray(total_temperature_K, dtype=np.float64)
    n = kg.shape[0]
    tmean = float(tall.mean())
    out: list[GroupTemperature] = []
    for j, name in enumerate(names):
        if group_dof[j] <= 0:
            continue
        tg = kinetic_temperature(kg[:, j], group_dof[j])
        g, _ = statistical_inefficiency_of(tg) if n >= 4 else (1.0, "")
        err = float(np.std(tg)) * math.sqrt(g / n)
        diff = tg - tall
        gd, _ = statistical_inefficiency_of(diff) if n >= 4 else (1.0, "")
        derr = float(np.std(diff)) * math.sqrt(gd / n)
        dmean = float(diff.mean())
        z = dmean / derr if derr > 0 else (0.0 if dmean == 0 else math.inf)
        out.append(GroupTemperature(name=name, n_atoms=int(group_sizes[j]), n_dof=float(group_dof[j]),
                                    mean_K=float(tg.mean()), error_K=err, difference_K=dmean,
                                    difference_error_K=derr, z_score=float(z),
                                    relative_difference=dmean / tmean if tmean else math.nan,
                                    significant=bool(abs(z) > significance_z), statistical_inefficiency=g))
    return tuple(out)


WATER_RESIDUES = frozenset({"HOH", "WAT", "SOL", "H2O", "TIP3", "TIP3P", "TIP4", "TIP4P", "TIP5", "T3P", "T4P", "SPC",
                            "SPCE", "OPC", "DOD", "TP3", "TP4"})
ION_RESIDUES = frozenset({"NA", "CL", "K", "MG", "CA", "ZN", "NA+", "CL-", "SOD", "CLA", "POT", "CES", "LI", "RB", "CS",
                          "BR", "IOD", "F"})
PER_ATOM_PREFIXES = ("element ", "mass ", "species ")  # groups that cut through molecules


def default_groups(topology: Any, n_atoms: int, *, by_element: bool, masses_amu: np.ndarray | None = None,
                   species: Sequence[Any] | None = None) -> dict[str, np.ndarray]:
    """The equipartition groups a user would look at first.

    - species (H5MD ``species`` that name no element), else elements (topology), else distinct masses
      (no topology), when ``by_element``;
    - residue kinds, when there are several;
    - solute against solvent (water and ions), when the residue kinds do not already say it.

    Element (species, mass) groups cut through molecules; with rigid bonds the kinetic energy is not
    shared out per atom as 3/2 kT minus constraint halves, so the audit leaves them out of the judgement
    when constraints are found (``PER_ATOM_PREFIXES`` names them).
    """
    groups: dict[str, np.ndarray] = {}
    if by_element:
        if species is not None and len(species) == n_atoms:
            by_sp: dict[str, list[int]] = {}
            for i, sp in enumerate(species):
                by_sp.setdefault(f"species {sp}", []).append(i)
            if len(by_sp) > 1:
                groups.update({k: np.array(v) for k, v in by_sp.items()})
        elif topology is not None:
            by_el: dict[str, list[int]] = {}
            for atom in topology.atoms:
                el = atom.element.symbol if atom.element is not None else atom.name
                by_el.setdefault(f"element {el}", []).append(int(atom.index))
            if len(by_el) > 1:
                groups.update({k: np.array(v) for k, v in by_el.items()})
        elif masses_amu is not None and len(masses_amu) == n_atoms:
            m = np.asarray(masses_amu, dtype=np.float64)
            if np.all(np.isfinite(m)):
                by_m: dict[str, list[int]] = {}
                for i, mi in enumerate(m):
                    by_m.setdefault(f"mass {mi:.4g} amu", []).append(i)
                if 1 < len(by_m) <= 16:
                    groups.update({k: np.array(v) for k, v in by_m.items()})
    if topology is not None:
        by_res: dict[str, list[int]] = {}
        solvent: list[int] = []
        solute: list[int] = []
        for atom in topology.atoms:
            rname = atom.residue.name
            by_res.setdefault(f"residue {rname}", []).append(int(atom.index))
            is_solvent = rname.upper() in WATER_RESIDUES or rname.upper() in ION_RESIDUES
            (solvent if is_solvent else solute).append(int(atom.index))
        one_atom_residues = topology.n_residues == topology.n_atoms  # a topology made from elements
        if len(by_res) > 1 and not one_atom_residues:
            groups.update({k: np.array(v) for k, v in by_res.items()})
        if solvent and solute and len(by_res) > 2:
            groups["solute"] = np.array(solute)
            groups["solvent (water and ions)"] = np.array(solvent)
    m_all = None if masses_amu is None or len(masses_amu) != n_atoms else np.asarray(masses_amu, dtype=np.float64)
    return {k: v for k, v in groups.items() if 0 < v.size < n_atoms  # a group of virtual sites only: no DOF
            and (m_all is None or not np.all(m_all[v] == 0.0))}


def largest_split(group_kinetic_kJ_per_mol: np.ndarray, group_dof: Sequence[float], names: Sequence[str],
                  keep: Sequence[str] | None = None) -> dict[str, Any] | None:
    """The hottest and the coldest group and the significance of their difference.

    T_g(t) = 2 K_g(t) / (N_dof,g k_B) per frame; split = mean(T_hot - T_cold) with its standard error
    std(T_hot - T_cold) sqrt(g / n) (g of the difference series, Sokal window), z = split / error.

    Returns a dict (hot, cold, their mean temperatures in K, split_K, error_K, z) or None with fewer
    than two groups.
    """
    kg = np.asarray(group_kinetic_kJ_per_mol, dtype=np.float64)
    idx = [j for j, nm in enumerate(names) if group_dof[j] > 0 and (keep is None or nm in keep)]
    if len(idx) < 2 or kg.shape[0] < 2:
        return None
    temps = {j: kinetic_temperature(kg[:, j], group_dof[j]) for j in idx}
    means = {j: float(np.mean(temps[j])) for j in idx}
    hot = max(idx, key=lambda j: means[j])
    cold = min(idx, key=lambda j: means[j])
    diff = temps[hot] - temps[cold]
    n = diff.size
    g, _ = statistical_inefficiency_of(diff) if n >= 4 else (1.0, "")
    err = float(np.std(diff)) * math.sqrt(g / n)
    split = float(diff.mean())
    z = split / err if err > 0 else (0.0 if split == 0 else math.inf)
    return {"hot": names[hot], "cold": names[cold], "hot_K": means[hot], "cold_K": means[cold],
            "split_K": split, "error_K": err, "z": float(z), "statistical_inefficiency": g}


# ---------------------------------------------------------------------------------------------------
# Canonical-ensemble distribution checks
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class DistributionCheck:
    """A Kolmogorov-Smirnov test of samples against a reference distribution."""

    name: str
    reference: str  # e.g. "scipy.stats.gamma(a=150, scale=2.494 kJ/mol)"
    n_samples: int
    statistic: float
    p_value: float
    sample_mean: float
    expected_mean: float
    sample_std: float
    expected_std: float
    unit: str


def thin_indices(n: int, g: float) -> np.ndarray:
    """Indices 0, s, 2s, ... with s = ceil(g): roughly independent samples of a series with inefficiency g."""
    return np.arange(0, n, max(1, int(math.ceil(g))))


def kinetic_energy_distribution_check(
    kinetic_kJ_per_mol: np.ndarray, n_dof: float, temperature_K: float,
) -> DistributionCheck:
    """KS test of (decorrelated) kinetic energies against Gamma(N_dof/2, scale = kT).

    The canonical kinetic-energy distribution (Gibbs 1902); scipy.stats.gamma / kstest.

    Parameters
    ----------
    kinetic_kJ_per_mol : ndarray, shape (n,), kJ/mol, decorrelated samples
    n_dof : float
    temperature_K : float
    """
    from scipy import stats

    k = np.asarray(kinetic_kJ_per_mol, dtype=np.float64)
    kt = KB_KJ_PER_MOL_K * temperature_K
    dist = stats.gamma(a=n_dof / 2.0, scale=kt)
    res = stats.kstest(k, dist.cdf)
    return DistributionCheck(name="kinetic energy", reference=f"gamma(a={n_dof / 2:g}, scale={kt:.6g} kJ/mol)",
                             n_samples=int(k.size), statistic=float(res.statistic), p_value=float(res.pvalue),
                             sample_mean=float(k.mean()), expected_mean=float(dist.mean()),
                             sample_std=float(k.std(ddof=1)) if k.size > 1 else math.nan,
                             expected_std=float(dist.std()), unit="kJ/mol")


def maxwell_speed_check(speeds_nm_per_ps: np.ndarray, mass_amu: float, temperature_K: float,
                        *, name: str = "speeds") -> DistributionCheck:
    """KS test of speeds against Maxwell-Boltzmann, scipy.stats.maxwell(scale = sqrt(kT/m)).

    Maxwell-Boltzmann speeds, scale sqrt(kT/m). Parameters: speeds (n,), nm/ps; mass in amu; temperature in K.
    """
    from scipy import stats

    s = np.asarray(speeds_nm_per_ps, dtype=np.float64)
    a = math.sqrt(KB_KJ_PER_MOL_K * temperature_K / mass_amu)
    dist = stats.maxwell(scale=a)
    res = stats.kstest(s, dist.cdf)
    return DistributionCheck(name=name, reference=f"maxwell(scale={a:.6g} nm/ps)", n_samples=int(s.size),
                             statistic=float(res.statistic), p_value=float(res.pvalue),
                             sample_mean=float(s.mean()), expected_mean=float(dist.mean()),
                             sample_std=float(s.std(ddof=1)) if s.size > 1 else math.nan,
                             expected_std=float(dist.std()), unit="nm/ps")


def species_of(topology: Any, masses_amu: np.ndarray) -> dict[str, np.ndarray]:
    """Atoms grouped by species: element symbol and mass from the topology, else by mass alone."""
    m = np.asarray(masses_amu, dtype=np.float64)
    out: dict[str, list[int]] = {}
    if topology is not None:
        for atom in topology.atoms:
            el = atom.element.symbol if atom.element is not None else atom.name
            out.setdefault(f"{el} ({m[atom.index]:.4g} amu)", []).append(int(atom.index))
    else:
        for i, mi in enumerate(m):
            out.setdefault(f"mass {mi:.4g} amu", []).append(i)
    return {k: np.array(v) for k, v in out.items()}


def unconstrained_atoms(n_atoms: int, rigid_pairs: Iterable[Sequence[int]] | np.ndarray) -> np.ndarray:
    """Boolean mask, shape (n_atoms,), True for atoms in no rigid pair."""
    mask = np.ones(n_atoms, dtype=bool)
    rp = np.asarray(rigid_pairs, dtype=np.int64).reshape(-1, 2)
    mask[rp.ravel()] = False
    return mask
