"""The default coordinate of a run: chosen with a reason, never a stiff bond or a constant.

Every place that needs a coordinate the user did not give (``memory`` without a series, the report,
the window, ``coords`` without ``--coordinate``) calls :func:`choose_coordinate` and shows its
``reason`` ("chosen automatically: ...").

The rule (ours, a heuristic; the user's own coordinate always wins):

1. A pure liquid (every atom is solvent: water, or many copies of a small residue) has no obvious
   reaction coordinate: none is chosen, and the user is asked for one.
2. A solute with a protein backbone: the backbone dihedral (phi or psi) with the widest spread.
3. A solute of two atoms: their distance (unless it is a bond to hydrogen), without reading frames.
   A small solute (at most ``max_pair_atoms`` atoms): the distance between two solute atoms with the
   widest distribution among those with two states (a barrier of at least ``crossings.barrier`` kT in
   -kT ln P(r)); pairs whose distance fluctuates by less than ``coordinate.stiff_pair`` (relative: a
   covalent bond or a constrained pair) and constants are never chosen. Without two-state pairs: the
   first principal component of the solute (three atoms or more), else the widest pair.
4. A larger solute: its first principal component (mass-weighted, fitted; ``pc(1)``).

Candidates are judged on at most ``max_frames`` frames spread over the run (positions of the candidate
atoms only). With fewer than ``min_frames`` frames nothing can be judged and the first solute pair is
taken, saying so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.verdicts import THRESHOLDS, Explanation, Threshold, register

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

register(
    Threshold("coordinate.stiff_pair", caution=0.05, problem=0.05, unit="relative standard deviation",
              source="common practice: a covalent bond fluctuates by 2-3% at room temperature (O-H: "
                     "sqrt(kT/k_b) = 0.0023 nm on 0.0957 nm with a typical force constant); 5% leaves a margin",
              higher_is_worse=False,
              description="spread of a pair distance relative to its mean below which the pair is a stiff "
                          "bond or held rigid, never a default coordinate"),
    Explanation(
        title="Default coordinate",
        what="The coordinate phasewake picks when none is given, and why.",
        method="A pure liquid gets none (no obvious reaction coordinate). Otherwise the solute's backbone "
               "dihedral with the widest spread, else the solute pair distance with the widest distribution "
               "that shows two states (a barrier in -kT ln P), else the solute's first principal component. "
               "Stiff bonds (relative spread below 5%) and constants are never chosen.",
        threshold="A pair fluctuating by less than 5% of its length counts as a stiff bond (common practice); "
                  "two states need a barrier of at least 1 kT (common practice).",
        advice="Give the coordinate that describes your process (--coordinate, or the coordinate box in the "
               "window): an automatic choice is a starting point only.",
    ),
)

COVALENT_NM = 0.2  # longer than any covalent bond to hydrogen or between first-row atoms (common practice)

SOLVENT_NOTE = ("no obvious reaction coordinate: every atom belongs to the solvent (a pure liquid); "
                "give one with --coordinate (for example a distance, an angle or pc(1))")


@dataclass(frozen=True)
class CoordinateChoice:
    """The default coordinate of a run (``spec`` None: none could be chosen) and the reason, in words."""

    spec: str | None
    reason: str  # "chosen automatically: ..." or why none was chosen
    kind: str  # "pair distance", "backbone dihedral", "principal component", "position", "none"
    details: dict[str, Any] = field(default_factory=dict)

    @property
    def label(self) -> str:
        """One line for output: the spec and its reason."""
        return self.reason if self.spec is None else f"{self.spec} ({self.reason})"


def barrier_kT(values: np.ndarray) -> float:
    """Height in kT of the highest barrier of -kT ln P(q) seen from both sides (0 when unimodal).

    From :func:`phasewake.core.analyses.landscape.free_energy_profile` (minima closer than 0.5 kT merged), as the
    state suggestion of ``crossings`` uses it.
    """
    from phasewake.core.analyses.landscape import free_energy_profile
    from phasewake.core.errors import PhasewakeError

    q = np.asarray(values, dtype=float)
    q = q[np.isfinite(q)]
    if q.size < 20 or not float(q.max()) > float(q.min()):
        return 0.0
    try:
        prof = free_energy_profile(q, temperature_K=300.0, min_depth_kT=0.5)
    except PhasewakeError:
        return 0.0
    best = 0.0
    for bar in prof.barriers:
        h = min(bar.height_from_left_kJ_per_mol, bar.height_from_right_kJ_per_mol) / prof.kT_kJ_per_mol
        if math.isfinite(h):
            best = max(best, h)
    return float(best)


def _backbone_dihedrals(topology: Any, solute: set[int]) -> list[tuple[str, tuple[int, int, int, int]]]:
    """(name, atoms) of phi and psi of solute residues that have N, CA and C (protein backbone)."""
    out: list[tuple[str, tuple[int, int, int, int]]] = []
    residues = [r for r in topology.residues]
    named: list[dict[str, int] | None] = []
    for r in residues:
        found = {a.name: a.index for a in r.atoms if a.name in ("N", "CA", "C") and a.index in solute}
        named.append(found if len(found) == 3 else None)
    for k, (r, d) in enumerate(zip(residues, named)):
        if d is None:
            continue
        prev = named[k - 1] if k > 0 and residues[k - 1].chain is r.chain else None
        nxt = named[k + 1] if k + 1 < len(residues) and residues[k + 1].chain is r.chain else None
        if prev is not None:
            out.append((f"phi of {r.name}{r.resSeq}", (prev["C"], d["N"], d["CA"], d["C"])))
        if nxt is not None:
            out.append((f"psi of {r.name}{r.resSeq}", (d["N"], d["CA"], d["C"], nxt["N"])))
    return out


class _PositionSample:
    """Positions (float64) of some atoms, and boxes, of every frame fed: a frame consumer
    (``core/model/framepass.py``) for the sample :func:`choose_coordinate` looks at."""

    needs_positions = True
    needs_velocities = False

    def __init__(self, atoms: np.ndarray) -> None:
        self.want = np.asarray(atoms, dtype=np.int64)
        self.atoms: np.ndarray | None = np.unique(self.want)
        self._local = self.want
        self.pos: list[np.ndarray] = []
        self.box: list[np.ndarray] = []

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        from phasewake.core.model.feeding import local_columns

        self._local = local_columns(columns, self.want)

    def update(self, chunk: Any) -> None:
        self.pos.append(np.asarray(chunk.positions_nm, dtype=np.float64)[:, self._local])
        if chunk.box_nm is not None:
            self.box.append(np.asarray(chunk.box_nm, dtype=np.float64))

    def merge(self, later: _PositionSample) -> None:
        self.pos += later.pos
        self.box += later.box

    def finish(self) -> tuple[np.ndarray, np.ndarray | None] | None:
        if not self.pos:
            return None
        p = np.concatenate(self.pos)
        b = np.concatenate(self.box) if self.box and sum(x.shape[0] for x in self.box) == p.shape[0] else None
        return p, b


def _sample_positions(run: Run, atoms: np.ndarray, max_frames: int) -> tuple[np.ndarray, np.ndarray | None] | None:
    """Positions (F, len(atoms), 3) of at most ``max_frames`` frames spread over the run, and the box."""
    from phasewake.core.errors import PhasewakeError
    from phasewake.core.model.feeding import feed

    if run.frames is None or run.n_frames < 1:
        return None
    stride = max(1, -(-run.n_frames // max_frames))
    sample = _PositionSample(atoms)
    try:
        for _ in feed(run, {"sample": sample}, stride=stride):
            pass
    except PhasewakeError:
        return None
    return sample.finish()


def _dihedral_values(p: np.ndarray, quad: tuple[int, int, int, int]) -> np.ndarray:
    b0 = p[:, quad[0]] - p[:, quad[1]]
    b1 = p[:, quad[2]] - p[:, quad[1]]
    b2 = p[:, quad[3]] - p[:, quad[2]]
    b1n = b1 / np.linalg.norm(b1, axis=-1, keepdims=True)
    v = b0 - np.sum(b0 * b1n, axis=-1, keepdims=True) * b1n
    w = b2 - np.sum(b2 * b1n, axis=-1, keepdims=True) * b1n
    return np.arctan2(np.sum(np.cross(b1n, v) * w, axis=-1), np.sum(v * w, axis=-1))


def choose_coordinate(run: Run, *, max_frames: int = 400, min_frames: int = 20, max_pair_atoms: int = 40,
                      max_dihedrals: int = 60) -> CoordinateChoice:
    """The default coordinate of ``run`` with the reason for it (see the module docstring).

    In steps: the solute (or a choice made without one), the widest backbone dihedral of a protein, the
    first principal component of a large solute, else the widest two-state distance between solute atoms.
    """
    solute, early = _solute_or_choice(run, max_pair_atoms)
    if early is not None:
        return early
    assert solute is not None
    if run.topology is not None:
        backbone = _backbone_choice(run, solute, max_frames=max_frames, min_frames=min_frames,
                                    max_dihedrals=max_dihedrals)
        if backbone is not None:
            return backbone
    if solute.size > max_pair_atoms:
        return CoordinateChoice("pc(1)", f"chosen automatically: the first principal component of the "
                                f"{solute.size} solute atoms (mass-weighted, fitted)", "principal component")
    if solute.size == 2:  # one candidate: nothing to compare, no frames read (crossings judge it where used)
        return _only_pair_choice(run, int(solute[0]), int(solute[1]))
    return _pair_choice(run, solute, max_frames=max_frames, min_frames=min_frames)


def default_coordinates(run: Run) -> list[str]:
    """The default coordinate of a run as a list of zero or one spec.

    Chosen by :func:`choose_coordinate` (one rule for every caller; never a stiff bond or a constant; empty
    for a pure liquid). Use that function to get the reason, which every output shows ("chosen
    automatically: ...").
    """
    choice = choose_coordinate(run)
    return [] if choice.spec is None else [choice.spec]


def _solute_or_choice(run: Run, max_pair_atoms: int) -> tuple[np.ndarray | None, CoordinateChoice | None]:
    """The solute atoms, or the choice already made (no atoms, one atom, only solvent, no topology)."""
    from phasewake.core.analyses.atom_groups import solvent_atoms

    n = run.n_atoms
    top = run.topology
    if n < 1:
        return None, CoordinateChoice(None, "no atoms: no coordinate", "none")
    if n == 1:
        return None, CoordinateChoice("x(0)", "chosen automatically: the x position of the only atom", "position")
    if top is not None:
        solvent = solvent_atoms(top, n)
        if solvent.size >= n:
            return None, CoordinateChoice(None, SOLVENT_NOTE, "none", {"solvent_atoms": int(solvent.size)})
        return np.setdiff1d(np.arange(n), solvent), None
    if n <= max_pair_atoms:
        return np.arange(n), None
    return None, CoordinateChoice(None, "no obvious reaction coordinate: without a topology the solute cannot "
                                  "be told from the solvent; give a coordinate with --coordinate", "none")


def _backbone_choice(run: Run, solute: np.ndarray, *, max_frames: int, min_frames: int,
                     max_dihedrals: int) -> CoordinateChoice | None:
    """A protein's backbone dihedral with the widest spread, or None when the solute has none."""
    dihedrals = _backbone_dihedrals(run.topology, set(int(i) for i in solute))[:max_dihedrals]
    if not dihedrals:
        return None
    atoms = np.unique(np.array([q for _, quad in dihedrals for q in quad]))
    local = {int(a): i for i, a in enumerate(atoms)}
    got = _sample_positions(run, atoms, max_frames)
    if got is None or got[0].shape[0] < min_frames:
        name, quad = dihedrals[0]
        return CoordinateChoice(f"dihedral({', '.join(str(i) for i in quad)})",
                                f"chosen automatically: the backbone dihedral {name} (too few frames to "
                                "compare the backbone dihedrals)", "backbone dihedral")
    spreads = []
    for _name, quad in dihedrals:
        ang = _dihedral_values(got[0], tuple(local[i] for i in quad))  # type: ignore[arg-type]
        spreads.append(1.0 - float(np.abs(np.mean(np.exp(1j * ang)))))  # circular variance
    k = int(np.argmax(spreads))
    name, quad = dihedrals[k]
    return CoordinateChoice(
        f"dihedral({', '.join(str(i) for i in quad)})",
        f"chosen automatically: the backbone dihedral {name}, the widest spread (circular variance "
        f"{spreads[k]:.2f}) of the {len(dihedrals)} backbone dihedrals", "backbone dihedral",
        {"circular_variance": spreads[k]})


def _only_pair_choice(run: Run, a: int, b: int) -> CoordinateChoice:
    """The distance of the only two solute atoms, unless it is a bond to hydrogen."""
    light = [i for i in (a, b) if 0 < float(run.masses_amu[i]) < 4.0]
    if light:
        return CoordinateChoice(None, "no obvious reaction coordinate: the only two solute atoms make a bond "
                                "to hydrogen, a fast vibration; give one with --coordinate", "none")
    where = ""
    top = run.topology
    if top is not None:
        res = top.atom(a).residue
        where = f" (residue {res.name})" if res is top.atom(b).residue else ""
    return CoordinateChoice(f"distance({a}, {b})", f"chosen automatically: the distance between atoms {a} and "
                            f"{b}, the only pair of solute atoms{where}", "pair distance")


def _stiff_pairs(run: Run, solute: np.ndarray, pairs_local: np.ndarray, mean: np.ndarray,
                 rel: np.ndarray) -> np.ndarray:
    """Pairs that are a stiff bond: bonded (or closer than a covalent length) with a small relative spread."""
    stiff = THRESHOLDS["coordinate.stiff_pair"].caution
    bonded = np.zeros(pairs_local.shape[0], dtype=bool)
    top = run.topology
    if top is not None:
        local = {int(a): i for i, a in enumerate(solute)}
        bset = {(min(local[b[0].index], local[b[1].index]), max(local[b[0].index], local[b[1].index]))
                for b in top.bonds if b[0].index in local and b[1].index in local}
        bonded = np.array([(int(i), int(j)) in bset for i, j in pairs_local], dtype=bool)
    return (rel < stiff) & (bonded | (mean < COVALENT_NM))


def _pair_choice(run: Run, solute: np.ndarray, *, max_frames: int, min_frames: int) -> CoordinateChoice:
    """The widest two-state distance between solute atoms (never a stiff bond or a constant)."""
    from phasewake.core.analyses.temperature import pair_distances

    ii, jj = np.triu_indices(solute.size, k=1)
    pairs_local = np.stack([ii, jj], axis=1)
    got = _sample_positions(run, solute, max_frames)
    if got is None or got[0].shape[0] < min_frames:
        a, b = int(solute[0]), int(solute[1])
        return CoordinateChoice(f"distance({a}, {b})", "chosen automatically: the first pair of solute atoms "
                                "(too few frames to compare the candidate pairs)", "pair distance")
    d = pair_distances(got[0], pairs_local, got[1])  # (F, P) nm
    mean = d.mean(axis=0)
    std = d.std(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.where(mean > 0, std / mean, 0.0)
    # a constant: any pair below the crossings.constant spread
    stiff_pair = _stiff_pairs(run, solute, pairs_local, mean, rel)
    flexible = np.flatnonzero(~stiff_pair & (rel >= THRESHOLDS["crossings.constant"].caution))
    if flexible.size == 0:
        return CoordinateChoice(None, "no obvious reaction coordinate: every distance between solute atoms is a "
                                f"stiff bond (relative spread below {THRESHOLDS['coordinate.stiff_pair'].caution:g})"
                                " or held rigid; give one with --coordinate", "none")
    need_barrier = THRESHOLDS["crossings.barrier"].caution
    order = flexible[np.argsort(-std[flexible])]
    bimodal = [(int(p), h) for p in order[:200] if (h := barrier_kT(d[:, p])) >= need_barrier]
    if bimodal:
        p, h = max(bimodal, key=lambda ph: std[ph[0]])
        a, b = int(solute[pairs_local[p, 0]]), int(solute[pairs_local[p, 1]])
        n_bi = len(bimodal)
        return CoordinateChoice(
            f"distance({a}, {b})",
            f"chosen automatically: the distance between atoms {a} and {b}, the widest two-state distribution "
            f"(barrier {h:.1f} kT, spread {std[p]:.3g} nm) of {n_bi} two-state solute pair(s)", "pair distance",
            {"barrier_kT": h, "std_nm": float(std[p]), "n_two_state_pairs": n_bi})
    if solute.size >= 3:
        return CoordinateChoice("pc(1)", "chosen automatically: the first principal component of the "
                                f"{solute.size} solute atoms (no solute pair distance shows two states)",
                                "principal component")
    p = int(order[0])
    a, b = int(solute[pairs_local[p, 0]]), int(solute[pairs_local[p, 1]])
    return CoordinateChoice(f"distance({a}, {b})", f"chosen automatically: the distance between atoms {a} and "
                            f"{b} (the only solute pair; it shows no barrier of {need_barrier:g} kT)",
                            "pair distance", {"std_nm": float(std[p])})


# Thresholds of a coordinate that the chooser and the crossings both judge by (registered here, where
# the default coordinate is chosen, so that neither imports the other's module for them).
register(
    Threshold(
        kind="crossings.barrier", caution=1.0, problem=1.0, unit="kT", higher_is_worse=False,
        source="common practice: a dip of less than about 1 kT in -kT ln P(q) is within thermal noise, "
               "not two states",
        description="highest barrier of the coordinate's free-energy profile, seen from both sides",
    ),
    Explanation(
        title="A barrier to define states",
        what="Whether the coordinate's distribution has two states separated by a barrier, so that "
             "crossings between them mean something.",
        method="The free-energy profile -kT ln P(q) (histogram, minima closer than 0.5 kT merged); the "
               "barrier highest from both sides.",
        threshold="States are only suggested over a barrier of at least 1 kT (common practice); below it the "
                  "crossings would count noise, and no states are defined.",
        advice="Choose a coordinate that separates the states of your process, or give the states "
               "yourself (--states) if you know them from elsewhere.",
    ),
)
register(
    Threshold(
        kind="crossings.constant", caution=1e-3, problem=1e-3, unit="relative standard deviation",
        higher_is_worse=False,
        source="the rigid-pair criterion of the constraint inference (relative spread 1e-3: constraint "
               "solvers hold bonds to 1e-4 or better; float32 round-off is 6e-8)",
        description="spread of the coordinate relative to its mean below which it is constant",
    ),
    Explanation(
        title="A coordinate that moves",
        what="Whether the coordinate changes at all beyond constraint tolerance and round-off.",
        method="Standard deviation of the coordinate over all frames against its mean magnitude "
               "(and an absolute floor of 1e-6 of its unit).",
        threshold="Below a relative 1e-3 the coordinate is constant (a constrained bond, a rigid "
                  "molecule); its crossings would be round-off noise and are refused.",
        advice="Choose a coordinate that moves: for a rigid molecule a distance between molecules, an "
               "angle, or a principal component.",
    ),
)
