"""A run folder: find the engine's files of one run in a folder the user names (or drops on the window).

Every file in the folder (not its sub-folders, not hidden files) is offered to the reader registry;
files no reader claims are left out and named. Of what is claimed:

- trajectories are grouped into runs by name: ``md.xtc`` and ``md.part0002.xtc`` (GROMACS
  ``-noappend``), ``prod1.nc`` and ``prod2.nc`` are parts of one run; the same run written in several
  formats (``md.trr`` and ``md.xtc``) is read from the format that holds the most (velocities first:
  TRR, NetCDF, LAMMPS dumps, then DCD, then XTC), the others are left out and named;
- two or more trajectories that are not parts of one run make the choice ambiguous: one line listing
  the candidates, nothing opened;
- the topology is the one whose name matches the trajectory, else by kind (LAMMPS data file for a dump;
  PSF/PRMTOP; then GRO/PDB);
- energy files, logs and parameter files claimed by a reader are all taken.

What was taken and what was left out is returned as lines for the run's warnings (``describe`` shows
them).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from phasewake.core.errors import InputError, PhasewakeError

# The order in which formats of the same run are preferred (velocities stored first).
_FORMAT_RANK = {".trr": 0, ".nc": 1, ".ncdf": 1, ".netcdf": 1, ".lammpstrj": 2, ".lammpsdump": 2, ".dump": 2,
                ".dcd": 3, ".xtc": 4}
_STRUCTURE = (".pdb", ".pdb.gz", ".gro", ".cif", ".pdbx", ".mol2")
# Files a folder often holds beside a run that no engine writes as run output (notes, scripts, figures,
# reports); never offered to the readers, whose content claims could mistake them for a log.
_NOT_RUN_FILES = (".json", ".md", ".rst", ".py", ".sh", ".ipynb", ".png", ".jpg", ".jpeg", ".svg", ".pdf", ".html",
                  ".yml", ".yaml", ".toml", ".cfg", ".ini", ".gz", ".zip", ".tar", ".bz2", ".xz", ".pwsession")
_TOPOLOGY_RANK = {"lammps-data": 0, ".psf": 1, ".prmtop": 1, ".parm7": 1, ".gro": 2, ".pdb": 2, ".pdb.gz": 2}


@dataclass
class FolderFiles:
    """What :func:`find_run_files` chose in a folder."""

    folder: Path
    paths: list[Path] = field(default_factory=list)
    left_out: list[tuple[Path, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _suffix(path: Path) -> str:
    name = path.name.lower()
    return ".pdb.gz" if name.endswith(".pdb.gz") else path.suffix.lower()


def run_family(path: Path) -> str:
    """The name a run's parts share: ``md.part0002.xtc`` -> ``md``; ``prod2.nc`` -> ``prod``;
    ``dump.1000.lammpstrj`` -> ``dump``."""
    stem = path.name[: -len(_suffix(path))] if _suffix(path) else path.name
    stem = re.sub(r"\.part\d+$", "", stem, flags=re.IGNORECASE)
    stem = re.sub(r"[._-]*\d+$", "", stem)
    return stem.lower() or path.name.lower()


def find_run_files(folder: str | Path) -> FolderFiles:
    """Choose the files of one run in ``folder``; InputError (one line, candidates named) when ambiguous."""
    from phasewake.core.readers.cp2k_xyz import is_velocity_name
    from phasewake.core.readers.parts import natural_key
    from phasewake.core.readers.velocity_file import is_velocity_file

    d = Path(folder)
    out = FolderFiles(folder=d)
    try:
        entries = sorted((p for p in d.iterdir() if p.is_file() and not p.name.startswith(".")), key=natural_key)
    except PermissionError as exc:
        raise InputError("cannot list the folder: permission denied", path=d) from exc
    # NAMD velocity DCDs and CP2K's PROJECT-vel-1.xyz: velocities of the positions beside them
    velocity_files = [p for p in entries if is_velocity_file(p) or is_velocity_name(p)]
    runs, trajs, tops, others = _sort_files([p for p in entries if p not in velocity_files], out)
    chosen, tops = _choose_frames(d, runs, trajs, tops, out)
    top = _choose_topology(chosen, tops, out) if tops and chosen and not runs else None
    if len(velocity_files) > 1:
        raise InputError(f"the folder holds {len(velocity_files)} velocity files "
                         f"({', '.join(p.name for p in velocity_files)}). Name the files to open", path=d)
    out.paths = chosen + ([top] if top is not None else []) + (velocity_files if chosen else []) + \
        [p for p, _ in others]
    if not out.paths:
        raise InputError("the folder holds no file of a run that we read"
                         + (f" (found {', '.join(p.name for p, _ in out.left_out[:6])})" if out.left_out else ""),
                         path=d)
    took = ", ".join(p.name for p in out.paths)
    note = f"run folder {d.resolve().name or d}: took {took}"
    if out.left_out:
        note += "; left out " + ", ".join(f"{p.name} ({why})" for p, why in out.left_out)
    out.notes.append(note)
    return out


_Named = list[tuple[Path, str]]  # (path, the name of the reader that claims it)


def _sort_files(files: list[Path], out: FolderFiles) -> tuple[list[Path], list[Path], _Named, _Named]:
    """(run files, trajectories, topologies, energy and parameter files); the rest goes to ``out.left_out``."""
    from phasewake.core.readers.registry import identify

    runs: list[Path] = []
    trajs: list[Path] = []
    tops: _Named = []
    others: _Named = []
    for p in files:
        if _suffix(p) in _NOT_RUN_FILES:
            out.left_out.append((p, "not a run file"))
            continue
        try:
            entry = identify(p)
        except PhasewakeError:
            out.left_out.append((p, "no reader claims it"))
            continue
        if entry.kind == "run":
            runs.append(p)
        elif entry.kind == "trajectory" and _suffix(p) not in _STRUCTURE:
            trajs.append(p)
        elif entry.kind == "topology" or _suffix(p) in _STRUCTURE:
            tops.append((p, entry.name))
        else:
            others.append((p, entry.name))
    return runs, trajs, tops, others


def _choose_frames(d: Path, runs: list[Path], trajs: list[Path], tops: _Named,
                   out: FolderFiles) -> tuple[list[Path], _Named]:
    """The frame files of the one run in the folder (a run file, the parts of one trajectory in its best
    format, or a structure file), and the topologies left to choose from."""
    families: dict[str, list[Path]] = {}
    for p in trajs:
        families.setdefault(run_family(p), []).append(p)
    candidates = [f"{fam} ({', '.join(p.name for p in ps)})" for fam, ps in families.items()] + \
        [p.name for p in runs]
    if len(families) + len(runs) > 1:
        raise InputError(f"the folder holds {len(families) + len(runs)} candidate runs that are not parts of one "
                         f"run: {'; '.join(candidates)}. Name the files to open", path=d)
    if runs:
        out.left_out += [(p, "a self-contained run file needs no topology") for p, _ in tops]
        return runs, []
    if families:
        (fam, ps), = families.items()
        best = min(_FORMAT_RANK.get(_suffix(p), 5) for p in ps)
        chosen = [p for p in ps if _FORMAT_RANK.get(_suffix(p), 5) == best]
        for p in ps:
            if p not in chosen:
                out.left_out.append((p, f"the same run as {chosen[0].name}, which "
                                        + ("stores velocities" if best <= 2 else "is preferred")
                                        + "; name the files to use this one instead"))
        return chosen, tops
    # no trajectory: a structure file (one frame) may still be a run
    struct = [p for p, _ in tops if _suffix(p) in _STRUCTURE]
    if not struct:
        return [], tops
    return [struct[-1]], [(p, n) for p, n in tops if p != struct[-1]]


def _choose_topology(chosen: list[Path], tops: _Named, out: FolderFiles) -> Path:
    """The topology of the run's family first, then by kind; the others go to ``out.left_out``."""
    from phasewake.core.readers.parts import natural_key

    fam = run_family(chosen[0])

    def rank(item: tuple[Path, str]) -> tuple[int, int, list]:
        p, name = item
        kind_rank = _TOPOLOGY_RANK.get(name, _TOPOLOGY_RANK.get(_suffix(p), 3))
        return (0 if run_family(p) == fam else 1, kind_rank, natural_key(p))

    ordered = sorted(tops, key=rank)
    top = ordered[0][0]
    for p, _ in ordered[1:]:
        out.left_out.append((p, f"another topology ({top.name} taken)"))
    return top
