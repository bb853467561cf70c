"""Files given together (opened, dropped or named on the command line), grouped into runs. No Qt here."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

SELF_CONTAINED = (".h5md", ".h5", ".hdf5")  # one file holds a whole run (frames, topology, energies)


def group_runs(paths: Sequence[str | Path]) -> list[tuple[str, ...]]:
    """Files given together, as runs: several self-contained files (H5MD, HDF5) are replicas, one run
    each; several folders are one run each; anything else (a trajectory with its topology and energy
    tables, or one run folder) is one run."""
    names = [str(p) for p in paths]
    if len(names) > 1 and all(Path(n).is_dir() for n in names):
        return [(n,) for n in names]  # run folders, one run each (core.readers.folder finds the files)
    if len(names) > 1 and all(Path(n).suffix.lower() in SELF_CONTAINED for n in names):
        return [(n,) for n in names]
    return [tuple(names)]
