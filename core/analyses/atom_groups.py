"""Atom groups a run implies by its topology: the solvent (water and many small identical molecules) and
the rest (the solute), the default group of a PCA or a pc(k) coordinate."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import mdtraj


def solvent_atoms(topology: mdtraj.Topology | None, n_atoms: int) -> np.ndarray:
    """Atoms that look like solvent: water, or small residues (<= 4 atoms) whose name occurs >= 10 times.

    A heuristic (common practice) used only to choose defaults (the PCA group, the first coordinate
    shown); the user can always name atoms explicitly.
    """
    if topology is None:
        return np.zeros(0, dtype=np.int64)
    from collections import Counter

    counts = Counter(r.name for r in topology.residues)
    out: list[int] = []
    for res in topology.residues:
        if res.is_water or (res.n_atoms <= 4 and counts[res.name] >= 10):
            out.extend(a.index for a in res.atoms)
    return np.asarray(sorted(out), dtype=np.int64)


def solute_atoms(topology: mdtraj.Topology | None, n_atoms: int) -> np.ndarray:
    """All atoms that :func:`solvent_atoms` does not call solvent (all atoms when that leaves none)."""
    solvent = solvent_atoms(topology, n_atoms)
    rest = np.setdiff1d(np.arange(n_atoms), solvent)
    return rest if rest.size else np.arange(n_atoms)
