"""The registry of file sources: a table you can read, each entry claiming its files and opening them.

Each entry claims a path ("mine" / "not mine") by content and suffix before anything is read, and carries
the function that opens what it claimed. Entries are tried in order; the first that claims a file reads it.
Reader modules are imported when an entry is used, not when the registry is.

What ``open`` takes and gives depends on the entry's kind:

- ``"run"`` (a self-contained file: frames, masses, maybe energies and metadata):
  ``open(path, group=..., units=...) -> Run``;
- ``"trajectory"`` (frames; needs a topology unless it carries one): ``open(path, topology_path) -> Run``
  (see ``pairs_velocities`` for velocities in a file of their own);
- ``"topology"``: ``open(path) -> Run``, the file alone as a run (a structure file: one or a few frames);
- ``"energy"`` and ``"parameters"`` (engine energy files, logs, tables; run parameters):
  ``open(path, EnergyOptions) -> EngineEnergy``.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import (
    CorruptFileError,
    EmptyFileError,
    FileMissingError,
    InputError,
    MissingDataError,
    UnknownFormatError,
)
from phasewake.core.readers.engine_common import EnergyOptions, EngineEnergy

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


@dataclass(frozen=True)
class ReaderEntry:
    """One source in the registry (see the module docstring for what ``open`` takes per ``kind``).

    ``parameters_only_beside``: names of readers whose files carry the energies when given too; this
    reader then reads only the run's parameters (GROMACS md.log beside its .edr).
    ``pairs_velocities``: a trajectory reader whose velocities come in a file of their own format, paired
    with the positions by step (CP2K's -pos- and -vel- xyz): ``open(path, topology_path, velocities=...)``.
    """

    name: str
    kind: str
    suffixes: tuple[str, ...]
    description: str
    claim: Callable[[Path], bool]
    open: Callable[..., Any]
    parameters_only_beside: tuple[str, ...] = ()
    pairs_velocities: bool = False


def _reader(module: str, func: str) -> Callable[..., Any]:
    """``phasewake.core.readers.<module>.<func>``, imported at its first call (readers are heavy)."""

    def call(*args: Any, **kwargs: Any) -> Any:
        return getattr(importlib.import_module(f"phasewake.core.readers.{module}"), func)(*args, **kwargs)

    call.__qualname__ = call.__name__ = f"{module}.{func}"
    return call


def _engine(module: str, func: str) -> Callable[[Path, EnergyOptions], EngineEnergy]:
    """An engine's energy or parameter reader, told what it uses of the options."""
    read = _reader(module, func)

    def open_energy(path: Path, options: EnergyOptions) -> EngineEnergy:
        out: EngineEnergy = read(path, column_roles=options.column_roles, timestep_ps=options.timestep_ps,
                                 units_style=options.units_style)
        return out

    return open_energy


def _open_gromacs_log(path: Path, options: EnergyOptions) -> EngineEnergy:
    from phasewake.core.readers import gromacs

    res = gromacs.read_md_log(path, column_roles=options.column_roles, timestep_ps=options.timestep_ps,
                              units_style=options.units_style, energies=options.energies)
    if not options.energies:
        res.warnings.append(f"{path.name}: energies taken from the .edr (every energy frame); the log gives the "
                            "run's parameters")
    return res


def _open_table(path: Path, options: EnergyOptions) -> EngineEnergy:
    from phasewake.core.readers import tables

    table, warnings = tables.read_table(path, column_roles=options.column_roles,
                                        timestep_ps=options.known_timestep_ps, assumed_units=options.assumed_units)
    return EngineEnergy(table=table, source=path.name, warnings=warnings)


def _open_mdtraj_h5(path: Path, *, group: str | None = None, units: Mapping[str, str] | None = None) -> Run:
    from phasewake.core.readers import mdtraj_hdf5

    return mdtraj_hdf5.open_mdtraj_h5_run(path)  # one group, and units in the file: nothing to choose


def _open_lammps_data_alone(path: Path) -> Run:
    raise MissingDataError("a LAMMPS data file is the topology of a run: give the dump (trajectory) too", path=path)


def _open_structure(path: Path) -> Run:
    from phasewake.core.readers import trajectory

    return trajectory.open_trajectory_run(path, None)


#: The registry, in the order claims are tried. Suffix lists are what each reader accepts.
READERS: tuple[ReaderEntry, ...] = (
    ReaderEntry("h5md", "run", (".h5md", ".h5", ".hdf5"), "H5MD 1.1 (HDF5 with an /h5md group)",
                _reader("h5md", "claim"), _reader("h5md", "open_h5md_run")),
    ReaderEntry("mdtraj-hdf5", "run", (".h5", ".hdf5", ".lh5"), "mdtraj's HDF5 trajectory (read with h5py)",
                _reader("mdtraj_hdf5", "claim"), _open_mdtraj_h5),
    ReaderEntry("lammps-dump", "trajectory", (".lammpstrj", ".lammpsdump", ".dump"),
                "LAMMPS dumps (text, dump custom/atom; our own reader, lazily in chunks)",
                _reader("lammps_dump", "claim"), _reader("lammps_dump", "open_dump_run")),
    ReaderEntry("cp2k-xyz", "trajectory", (".xyz",),
                "CP2K MD xyz: PROJECT-pos-1.xyz with PROJECT-vel-1.xyz (our own reader, lazily in chunks)",
                _reader("cp2k_xyz", "claim"), _reader("cp2k_xyz", "open_xyz_run"), pairs_velocities=True),
    ReaderEntry("lammps-data", "topology", (".data", ".lmp", ".lammps"),
                "LAMMPS data files as topology (masses, molecules, bonds)",
                _reader("lammps_data", "claim"), _open_lammps_data_alone),
    ReaderEntry("trajectory", "trajectory",
                (".dcd", ".xtc", ".trr", ".nc", ".ncdf", ".netcdf", ".lammpstrj", ".xyz", ".binpos",
                 ".pdb", ".pdb.gz", ".gro", ".mdcrd", ".crd", ".arc", ".dtr"),
                "trajectories read by mdtraj (lazily, in chunks)",
                _reader("trajectory", "claim_trajectory"), _reader("trajectory", "open_trajectory_run")),
    ReaderEntry("topology", "topology",
                (".pdb", ".pdb.gz", ".gro", ".psf", ".prmtop", ".parm7", ".mol2", ".hoomdxml", ".cif", ".pdbx"),
                "topology files read by mdtraj", _reader("trajectory", "claim_topology"), _open_structure),
    # engine energy files and logs, claimed by content before the generic tables
    ReaderEntry("gromacs-edr", "energy", (".edr",), "GROMACS energy file (.edr, single or double precision)",
                _reader("gromacs", "claim_edr"), _engine("gromacs", "read_edr")),
    ReaderEntry("gromacs-log", "energy", (".log",), "GROMACS md.log (energies and run parameters)",
                _reader("gromacs", "claim_md_log"), _open_gromacs_log, parameters_only_beside=("gromacs-edr",)),
    ReaderEntry("gromacs-mdp", "parameters", (".mdp",), "GROMACS run parameters (.mdp, mdout.mdp)",
                _reader("gromacs", "claim_mdp"), _engine("gromacs", "read_mdp")),
    ReaderEntry("lammps-log", "energy", (".lammps", ".log"), "LAMMPS log (log.lammps thermo output)",
                _reader("lammps_log", "claim"), _engine("lammps_log", "read_log")),
    ReaderEntry("amber-mdout", "energy", (".out", ".mdout", ".log"), "AMBER mdout (sander, pmemd)",
                _reader("amber", "claim"), _engine("amber", "read_mdout")),
    ReaderEntry("namd-log", "energy", (".log", ".out"), "NAMD log (ETITLE/ENERGY lines)",
                _reader("namd", "claim"), _engine("namd", "read_log")),
    ReaderEntry("cp2k-ener", "energy", (".ener",), "CP2K MD energy file (.ener)",
                _reader("cp2k", "claim"), _engine("cp2k", "read_ener")),
    ReaderEntry("cp2k-output", "parameters", (".out", ".log"), "CP2K main output (run parameters)",
                _reader("cp2k", "claim_output"), _engine("cp2k", "read_output")),
    ReaderEntry("openmm-csv", "energy", (".csv", ".txt", ".log"), "OpenMM StateDataReporter CSV",
                _reader("openmm_csv", "claim"), _engine("openmm_csv", "read_csv")),
    ReaderEntry("energy-table", "energy", (".csv", ".tsv", ".txt", ".dat", ".log", ".out", ".ene"),
                "energy tables: CSV/TSV/whitespace text with a header row", _reader("tables", "claim"), _open_table),
)


def file_patterns() -> tuple[str, ...]:
    """Glob patterns of every suffix a reader in :data:`READERS` accepts (for a file dialog's filter)."""
    return tuple(sorted({f"*{suffix}" for r in READERS for suffix in r.suffixes} | {"*.veldcd"}))


def supported_formats() -> str:
    """One line per reader: what it reads and its suffixes."""
    return "; ".join(f"{r.description} [{' '.join(r.suffixes)}]" for r in READERS)


def check_file(path: Path) -> None:
    """A typed error unless ``path`` is a non-empty file that can be read."""
    if not path.exists():
        raise FileMissingError("no such file", path=path)
    if path.is_dir():
        raise UnknownFormatError("is a folder, not a file", path=path)
    if path.stat().st_size == 0:
        raise EmptyFileError("file is empty", path=path)
    try:
        with open(path, "rb"):
            pass
    except PermissionError:
        raise InputError("permission denied: this file cannot be read", path=path) from None


def identify(path: str | Path) -> ReaderEntry:
    """The first registry entry that claims ``path``; UnknownFormatError listing what is supported."""
    p = Path(path)
    check_file(p)
    for entry in READERS:
        if entry.claim(p):
            return entry
    _refuse_damaged_hdf5(p)
    raise UnknownFormatError(f"no reader claims this file. Supported: {supported_formats()}", path=p)


_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def _refuse_damaged_hdf5(path: Path) -> None:
    """An HDF5 file (by its signature) that the HDF5 library cannot open is damaged, not of an unknown
    format: say so, as for .h5md (a truncated .h5 or .hdf5 run)."""
    try:
        with open(path, "rb") as f:
            head = f.read(8)
    except OSError:
        return
    if head != _HDF5_SIGNATURE:
        return
    import h5py

    try:
        with h5py.File(path, "r"):
            return  # readable HDF5, just not a layout we know
    except OSError as exc:
        raise CorruptFileError(f"HDF5 file that cannot be opened: truncated or damaged ({exc})", path=path) from None
