"""The reader layer: an explicit registry of file sources and :func:`open_run`.

Each reader in :data:`READERS` claims a path ("mine" / "not mine") by content and suffix before
anything is read. A run is built from one self-contained file (H5MD, mdtraj HDF5) or from a
trajectory plus a topology plus energy tables. Opening reads headers, not frames.

Every reader opens its inputs read-only and raises the typed errors of ``phasewake.core.errors``,
naming the file and the fault.
"""

from __future__ import annotations

import contextlib
import struct
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import (
    CorruptFileError,
    EmptyFileError,
    FileMissingError,
    InputError,
    MissingDataError,
    ResourceError,
    TopologyMismatchError,
    UnknownFormatError,
)
from phasewake.core.model.run import EnergyTable, Run, RunMetadata


@dataclass(frozen=True)
class ReaderEntry:
    """One source in the registry.

    kind : "run" (a self-contained file: frames, masses, maybe energies and metadata),
           "trajectory" (frames; needs a topology unless it carries one), "topology" or "energy".
    """

    name: str
    kind: str
    suffixes: tuple[str, ...]
    description: str
    claim: Callable[[Path], bool]


def _claim_h5md(path: Path) -> bool:
    from phasewake.core.readers import h5md

    return h5md.claim(path)


def _claim_mdtraj_h5(path: Path) -> bool:
    from phasewake.core.readers import mdtraj_hdf5

    return mdtraj_hdf5.claim(path)


def _claim_trajectory(path: Path) -> bool:
    from phasewake.core.readers import trajectory

    return trajectory.claim_trajectory(path)


def _claim_topology(path: Path) -> bool:
    from phasewake.core.readers import trajectory

    return trajectory.claim_topology(path)


def _claim_lammps_dump(path: Path) -> bool:
    from phasewake.core.readers import lammps_dump

    return lammps_dump.claim(path)


def _claim_lammps_data(path: Path) -> bool:
    from phasewake.core.readers import lammps_data

    return lammps_data.claim(path)


def _engine_claim(module: str, func: str = "claim") -> Callable[[Path], bool]:
    def claim(path: Path) -> bool:
        import importlib

        return bool(getattr(importlib.import_module(f"phasewake.core.readers.{module}"), func)(path))

    return claim


def _claim_table(path: Path) -> bool:
    from phasewake.core.readers import tables

    return tables.claim(path)


#: The registry, in the order claims are tried. Suffix lists are what each reader accepts.
READERS: tuple[ReaderEntry, ...] = (
    ReaderEntry("h5md", "run", (".h5md", ".h5", ".hdf5"), "H5MD 1.1 (HDF5 with an /h5md group)", _claim_h5md),
    ReaderEntry("mdtraj-hdf5", "run", (".h5", ".hdf5", ".lh5"), "mdtraj's HDF5 trajectory (read with h5py)", _claim_mdtraj_h5),
    ReaderEntry("lammps-dump", "trajectory", (".lammpstrj", ".lammpsdump", ".dump"),
                "LAMMPS text dumps (dump custom/atom; our own reader, lazily in chunks)", _claim_lammps_dump),
    ReaderEntry("cp2k-xyz", "trajectory", (".xyz",),
                "CP2K MD xyz: PROJECT-pos-1.xyz with PROJECT-vel-1.xyz (our own reader, lazily in chunks)",
                _engine_claim("cp2k_xyz")),
    ReaderEntry("lammps-data", "topology", (".data", ".lmp", ".lammps"),
                "LAMMPS data files as topology (masses, molecules, bonds)", _claim_lammps_data),
    ReaderEntry("trajectory", "trajectory",
                (".dcd", ".xtc", ".trr", ".nc", ".ncdf", ".netcdf", ".lammpstrj", ".xyz", ".binpos",
                 ".pdb", ".pdb.gz", ".gro", ".mdcrd", ".crd", ".arc", ".dtr"),
                "trajectories read by mdtraj (lazily, in chunks)", _claim_trajectory),
    ReaderEntry("topology", "topology",
                (".pdb", ".pdb.gz", ".gro", ".psf", ".prmtop", ".parm7", ".mol2", ".hoomdxml", ".cif", ".pdbx"),
                "topology files read by mdtraj", _claim_topology),
    # engine energy files and logs, claimed by content before the generic tables (engine_common.py)
    ReaderEntry("gromacs-edr", "energy", (".edr",), "GROMACS energy file (.edr, single or double precision)",
                _engine_claim("gromacs", "claim_edr")),
    ReaderEntry("gromacs-log", "energy", (".log",), "GROMACS md.log (energies and run parameters)",
                _engine_claim("gromacs", "claim_md_log")),
    ReaderEntry("gromacs-mdp", "parameters", (".mdp",), "GROMACS run parameters (.mdp, mdout.mdp)",
                _engine_claim("gromacs", "claim_mdp")),
    ReaderEntry("lammps-log", "energy", (".lammps", ".log"), "LAMMPS log (log.lammps thermo output)",
                _engine_claim("lammps_log")),
    ReaderEntry("amber-mdout", "energy", (".out", ".mdout", ".log"), "AMBER mdout (sander, pmemd)",
                _engine_claim("amber")),
    ReaderEntry("namd-log", "energy", (".log", ".out"), "NAMD log (ETITLE/ENERGY lines)", _engine_claim("namd")),
    ReaderEntry("cp2k-ener", "energy", (".ener",), "CP2K MD energy file (.ener)", _engine_claim("cp2k")),
    ReaderEntry("cp2k-output", "parameters", (".out", ".log"), "CP2K main output (run parameters)",
                _engine_claim("cp2k", "claim_output")),
    ReaderEntry("openmm-csv", "energy", (".csv", ".txt", ".log"), "OpenMM StateDataReporter CSV",
                _engine_claim("openmm_csv")),
    ReaderEntry("energy-table", "energy", (".csv", ".tsv", ".txt", ".dat", ".log", ".out", ".ene"),
                "energy tables: CSV/TSV/whitespace text with a header row", _claim_table),
)


def file_patterns() -> tuple[str, ...]:
    """Glob patterns of every suffix a reader in :data:`READERS` accepts (for a file dialog's filter)."""
    return tuple(sorted({f"*{suffix}" for r in READERS for suffix in r.suffixes} | {"*.veldcd"}))


def supported_formats() -> str:
    """One line per reader: what it reads and its suffixes."""
    return "; ".join(f"{r.description} [{' '.join(r.suffixes)}]" for r in READERS)


def _check_file(path: Path) -> None:
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
    _check_file(p)
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


_META_KEYS = ("timestep_ps", "n_constraints", "temperature_K", "ensemble", "thermostat", "integrator",
              "com_motion_removed")


def _apply_overrides(md: RunMetadata, overrides: Mapping[str, Any]) -> None:
    for key, val in overrides.items():
        if val is None:
            continue
        if not hasattr(md, key):
            raise TypeError(f"open_run() got an unknown metadata keyword {key!r}")
        setattr(md, key, val)
        md.sources[key] = "user"
        if key == "n_constraints":
            md.constraints_source = "user"


def open_run(
    paths: Sequence[str | Path] | str | Path,
    *,
    topology: str | Path | None = None,
    velocities: str | Path | None = None,
    energy_files: Sequence[str | Path] | None = None,
    column_roles: Mapping[str, str] | None = None,
    timestep_ps: float | None = None,
    n_constraints: int | None = None,
    temperature_K: float | None = None,
    ensemble: str | None = None,
    chunk_frames: int | None = None,
    group: str | None = None,
    units: Mapping[str, str] | None = None,
    units_style: str | None = None,
    **metadata: Any,
) -> Run:
    """Open one run from its files (headers only; frames stay on disk).

    Parameters
    ----------
    paths : one self-contained file (H5MD, mdtraj HDF5), or a trajectory plus optional topology and
        energy-table files, in any order. A file that only an energy-table reader claims is a table.
    topology : topology file for a trajectory that has none (PDB, GRO, PSF, PRMTOP, ...).
    velocities : a file of velocities beside the positions (NAMD velocity DCD); files named ``*.veldcd``
        or ``*.vel.dcd`` among ``paths`` are taken as such too.
    energy_files : more energy tables (joined on time).
    column_roles : energy-table column name -> role (see ``phasewake.core.model.run.ENERGY_ROLES``),
        overriding recognition by name; a name may carry its unit, "Epot (kcal/mol)".
    timestep_ps, n_constraints, temperature_K, ensemble, **metadata : override RunMetadata fields.
    chunk_frames : default chunk size for frame iteration (unused by readers that choose their own).
    group : H5MD particle group to read (default: the first with positions).
    units : units the user states for quantities whose files give none, by dimension
        ({"length": "A", "time": "fs", "energy": "kcal/mol", "temperature": "K", ...}); used only where a
        file is silent, and listed in the warnings. Units in the files always win.
    units_style : the LAMMPS unit style (lj, real, metal, ...) of a log that echoes no ``units`` command.

    Returns
    -------
    Run
    """
    if isinstance(paths, str | Path):
        paths = [paths]
    all_paths = [Path(p) for p in paths]
    if topology is not None:
        all_paths.append(Path(topology))
    all_paths += [Path(p) for p in (energy_files or [])]
    if not all_paths:
        raise InputError("no files given")
    from phasewake.core.readers.common import (
        check_constraints,
        check_masses,
        check_metadata,
        check_temperature,
        check_timestep,
    )

    # values given by the caller are refused before any file is read
    check_timestep(timestep_ps, path=None, where="the time step given (timestep_ps)")
    check_constraints(n_constraints, n_atoms=None, path=None, where="the constraint count given (n_constraints)")
    check_temperature(temperature_K, path=None, where="the temperature given (temperature_K)")
    folder_notes: list[str] = []
    if any(p.is_dir() for p in all_paths):
        all_paths, folder_notes = _expand_folders(all_paths)
    from phasewake.core.readers import cp2k_xyz
    from phasewake.core.readers.velocity_file import is_velocity_file

    def _is_vel(p: Path) -> bool:
        return is_velocity_file(p) or cp2k_xyz.is_velocity_name(p)

    vel_files = [p for p in all_paths if _is_vel(p)] + ([Path(velocities)] if velocities else [])
    all_paths = [p for p in all_paths if not _is_vel(p)]
    if len(vel_files) > 1:
        raise InputError(f"more than one velocity file given ({', '.join(p.name for p in vel_files)}); give one")
    for p in vel_files:
        _check_file(p)
    # CP2K's -vel- xyz is paired with its -pos- xyz by the CP2K reader itself (by MD step)
    cp2k_vel = vel_files[0] if vel_files and cp2k_xyz.claim(vel_files[0]) else None
    if cp2k_vel is not None:
        vel_files = []
    entries: list[tuple[Path, ReaderEntry]] = []
    for p in all_paths:
        entries.append((p, identify(p)))

    explicit_top = Path(topology) if topology is not None else None
    runs = [(p, e) for p, e in entries if e.kind == "run"]
    trajs = [(p, e) for p, e in entries if e.kind == "trajectory" and p != explicit_top]
    tops = [(p, e) for p, e in entries if e.kind == "topology" or p == explicit_top]
    tables = [p for p, e in entries if e.kind in ("energy", "parameters")]
    table_readers = [(p, e.name) for p, e in entries if e.kind in ("energy", "parameters")]
    if len(runs) + len(trajs) > 1:
        # a PDB/GRO next to another trajectory is its topology
        structural = [(p, e) for p, e in trajs if _is_topology_like(p)]
        if len(trajs) - len(structural) >= 1:
            trajs = [(p, e) for p, e in trajs if not _is_topology_like(p)]
            tops += structural
        if runs and (trajs or len(runs) > 1):
            names = ", ".join(p.name for p, _ in runs + trajs)
            raise InputError(f"more than one run file given ({names}); a self-contained run file (H5MD, HDF5) "
                             "is opened alone, one run at a time")

    warnings: list[str] = list(folder_notes)
    if cp2k_vel is not None and not trajs:
        raise MissingDataError("a CP2K velocity xyz needs its positions xyz (PROJECT-pos-1.xyz) too", path=cp2k_vel)
    if runs:
        with _unexpected_is_corrupt(runs[0][0]):
            run = _open_self_contained(runs[0][0], runs[0][1], group=group, units=units)
        if tops:
            run = _replace_topology(run, tops[0][0])
    elif trajs:
        top_path = tops[0][0] if tops else None
        kinds = {e.name == "lammps-dump" for _, e in trajs}
        if len(kinds) > 1:
            raise InputError(f"the trajectories {', '.join(p.name for p, _ in trajs)} mix LAMMPS dumps with other "
                             "formats; parts of one run are of one format: open one run at a time")
        parts = []
        if cp2k_vel is not None:
            if len(trajs) > 1:
                raise InputError(f"a CP2K velocity file ({cp2k_vel.name}) pairs with one positions file; "
                                 f"{len(trajs)} trajectories given")
            cp2k_xyz.require_cp2k(trajs[0][1].name, cp2k_vel)
            with _unexpected_is_corrupt(trajs[0][0]):
                parts.append(cp2k_xyz.open_xyz_run(trajs[0][0], top_path, velocities=cp2k_vel))
            all_paths.append(cp2k_vel)
        for tp, te in trajs if cp2k_vel is None else []:
            with _unexpected_is_corrupt(tp):
                parts.append(_open_trajectory(tp, te, top_path))
        if len(parts) == 1:
            run = parts[0]
        else:
            from phasewake.core.readers.parts import join_runs

            clock = "step" if all(r.metadata.extra.get("time_from") == "step number" for r in parts) else "ps"
            run, _ = join_runs(parts, clock=clock)
    elif tops and _is_lammps_data(tops[0][1]):
        raise MissingDataError("a LAMMPS data file is the topology of a run: give the dump (trajectory) too",
                               path=tops[0][0])
    elif tops:
        # a structure file alone (PDB/GRO): one or a few frames
        from phasewake.core.readers import trajectory

        with _unexpected_is_corrupt(tops[0][0]):
            run = trajectory.open_trajectory_run(tops[0][0], None)
    else:
        run = Run(name=tables[0].stem, paths=(), topology=None, masses_amu=np.zeros(0),
                  time_ps=np.zeros(0), frames=None, energies=None)
    warnings.extend(run.warnings)
    _keep_later_segments(run)

    table = None
    if tables:
        from phasewake.core.readers.engine_common import apply_facts, read_energy_sources

        with _unexpected_is_corrupt(tables[0] if len(tables) == 1 else None):
            table, engine_results, table_warnings = read_energy_sources(
                table_readers, column_roles=column_roles, timestep_ps=timestep_ps,
                frame_timestep_ps=run.metadata.timestep_ps, assumed_units=units, units_style=units_style)
        for res in engine_results:  # what the engine files say about the run (the user's overrides win below)
            apply_facts(run.metadata, res.facts, res.source, res.fact_sources)
            run.metadata.extra.update(res.extra)
        warnings.extend(table_warnings)
    if table is not None:
        _refuse_non_finite_time(table)
        run.energies = _merge_tables(run.energies, table, warnings)
        run.metadata.sources["energies"] = ", ".join(Path(p).name for p in table.sources)
        if run.frames is None:
            run.time_ps = table.time_ps
            run.name = tables[0].stem
        elif run.metadata.extra.get("time_from") == "frame index" and len(table) == run.n_frames \
                and not any("rows are numbered" in w for w in table_warnings):
            # a trajectory without times next to a table with one row per frame: the table's clock
            run.time_ps = table.time_ps
            retime = getattr(run.frames, "retime", None)
            if retime is not None:
                retime(table.time_ps)
            run.metadata.extra["time_from"] = f"{tables[0].name} (one row per frame)"
            warnings = [w for w in warnings if "holds no time axis" not in w]
            warnings.append(f"frame times taken from {tables[0].name}, which has one row per frame")

    if units_style and run.metadata.units_style is None:  # stated for files that do not say (dumps, tables)
        run.metadata.units_style = f"lammps {units_style}"
        run.metadata.sources["units_style"] = "stated (--units)"
    _apply_overrides(run.metadata, {"timestep_ps": timestep_ps, "n_constraints": n_constraints,
                                    "temperature_K": temperature_K, "ensemble": ensemble, **metadata})
    if chunk_frames is not None:
        run.metadata.extra["chunk_frames"] = int(chunk_frames)
    from phasewake.core.readers import lammps_dump

    if lammps_dump.lammps_frames(run.frames):
        with _unexpected_is_corrupt(run.paths[0] if run.paths else None):
            warnings.extend(lammps_dump.finish_run(run))

    if vel_files:
        from phasewake.core.readers.velocity_file import VelocityFileFrames

        if run.frames is None:
            raise MissingDataError("a velocity file needs the positions trajectory too", path=vel_files[0])
        with _unexpected_is_corrupt(vel_files[0]):
            run.frames = VelocityFileFrames(run.frames, vel_files[0], run.metadata.sources.get("positions", ""))
        run.metadata.sources["velocities"] = (f"{vel_files[0].name} (NAMD velocity DCD: internal units x "
                                              "20.45482706 = Angstrom/ps, full-step)")
        all_paths.append(vel_files[0])
    if run.frames is not None and not run.frames.has_velocities and run.frames.n_frames >= 2:
        from phasewake.core.readers.common import EstimatedVelocityFrames, frame_spacing_warning

        run.frames = EstimatedVelocityFrames(run.frames, run.time_ps)
        temp = run.metadata.temperature_K
        if temp is None and run.energies is not None and run.energies.by_role("temperature") is not None:
            tser = run.energies.by_role("temperature")
            temp = float(np.nanmean(tser.values)) if tser is not None and tser.values.size else None
        if run.metadata.extra.get("time_from") == "frame index":
            warnings.append("velocities are estimated by central differences of positions, but the files "
                            "hold no time axis: they are per frame, not per ps, until times are given "
                            "(an energy table with one row per frame, or a trajectory format with times)")
        elif run.metadata.extra.get("time_from") == "step number":
            warnings.append("velocities are estimated by central differences of positions, but the time step is "
                            "not known: they are per MD step, not per ps, until it is given (log.lammps or "
                            "--timestep)")
        else:
            warnings.append(frame_spacing_warning(run.frames.inner, run.time_ps, run.masses_amu,
                                                  temperature_K=temp))
        if run.frames.positions_lossy:
            warnings.append(f"velocities are estimated from positions stored to "
                            f"{run.frames.positions_precision_nm or 1e-3:g} nm (XTC): each difference carries that "
                            "rounding; give a trajectory with velocities (TRR) where there is one. Constraints are "
                            "not inferred from these positions: they come from the engine's files, the topology, "
                            "or --constraints")
        run.metadata.sources["velocities"] = "estimated by central differences of positions"

    # every route (any reader, any override): no impossible value reaches an analysis
    first = run.paths[0] if run.paths else (all_paths[0] if all_paths else None)
    check_metadata(run.metadata, n_atoms=run.n_atoms or None, path=first)
    check_masses(run.masses_amu, path=first, where=run.metadata.sources.get("masses", "masses"))
    run.paths = tuple(dict.fromkeys(all_paths))
    run.warnings = list(dict.fromkeys(warnings))
    return run


def _open_trajectory(path: Path, entry: ReaderEntry, top_path: Path | None) -> Run:
    """One trajectory file as a Run, by the reader that claimed it."""
    if entry.name == "lammps-dump":
        from phasewake.core.readers import lammps_dump

        return lammps_dump.open_dump_run(path, top_path)
    if entry.name == "cp2k-xyz":
        from phasewake.core.readers import cp2k_xyz

        return cp2k_xyz.open_xyz_run(path, top_path)
    from phasewake.core.readers import trajectory

    return trajectory.open_trajectory_run(path, top_path)


def _is_lammps_data(entry: ReaderEntry) -> bool:
    return entry.name == "lammps-data"


def _expand_folders(paths: Sequence[Path]) -> tuple[list[Path], list[str]]:
    """Each folder among ``paths`` replaced by the run files found in it (``core.readers.folder``)."""
    from phasewake.core.readers import folder

    out: list[Path] = []
    notes: list[str] = []
    for p in paths:
        if p.is_dir():
            found = folder.find_run_files(p)
            out.extend(found.paths)
            notes.extend(found.notes)
        else:
            out.append(p)
    return out, notes


def _keep_later_segments(run: Run) -> None:
    """Restarts glued into a trajectory or a run file's observables: keep the later segment of each (the
    readers warned of them; ``resolve_restarts``), record the joins (frames: ``metadata.extra
    ["frame_joins"]``; observables: ``EnergyTable.joins``)."""
    from dataclasses import replace

    from phasewake.core.readers.common import KeptFrames, resolve_restarts

    where = run.paths[0] if run.paths else None
    if run.frames is not None and run.time_ps.size > 1 and np.any(np.diff(run.time_ps) <= 0):
        keep, joins, _ = resolve_restarts(run.time_ps, path=where, what="frame")
        if keep is not None:
            run.frames = KeptFrames(run.frames, keep)
            run.time_ps = np.asarray(run.time_ps)[keep]
            run.metadata.extra["frame_joins"] = list(joins)
    tab = run.energies
    if tab is not None and len(tab) > 1 and np.any(np.diff(tab.time_ps) <= 0):
        keep, joins, _ = resolve_restarts(tab.time_ps, path=where, what="observable sample")
        if keep is not None:
            run.energies = EnergyTable(time_ps=np.asarray(tab.time_ps)[keep],
                                       series={k: replace(s_, values=np.asarray(s_.values)[keep])
                                               for k, s_ in tab.series.items()},
                                       sources=tab.sources, joins=tab.joins + joins)


def _refuse_non_finite_time(table: EnergyTable) -> None:
    """Every energy reader's time axis, whatever its engine: NaN, infinite or overflowing times are
    refused naming the file (backward or repeated times are the energy checks' business)."""
    from phasewake.core.errors import TimeAxisError

    t = np.asarray(table.time_ps, dtype=np.float64)
    with np.errstate(over="ignore", invalid="ignore"):
        bad = ~np.isfinite(t) if t.size < 2 else ~np.isfinite(t) | np.append(~np.isfinite(np.diff(t)), False)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise TimeAxisError(f"energy sample {i} is at time {t[i]:g} ps: not a finite number, or the time axis "
                            "overflows", path=table.sources[0] if table.sources else None)


def _is_topology_like(path: Path) -> bool:
    return path.name.lower().endswith((".pdb", ".pdb.gz", ".gro", ".mol2", ".cif", ".pdbx"))


@contextlib.contextmanager
def _unexpected_is_corrupt(path: Path | None) -> Iterator[None]:
    """A library error a reader did not foresee still reaches the user as a typed error naming the file."""
    try:
        yield
    except (KeyError, ValueError, TypeError, IndexError, AttributeError, OSError, RuntimeError, struct.error,
            AssertionError, EOFError) as exc:
        raise CorruptFileError(f"cannot read this file ({type(exc).__name__}: {exc})", path=path) from exc
    except MemoryError as exc:  # a size no header check foresaw: one line naming the file, not a traceback
        raise ResourceError(f"not enough memory to open this file ({exc or 'allocation failed'})",
                            path=path) from None


def _open_self_contained(path: Path, entry: ReaderEntry, *, group: str | None,
                         units: Mapping[str, str] | None = None) -> Run:
    if entry.name == "h5md":
        from phasewake.core.readers import h5md

        c = h5md.read_h5md(path, group=group, assumed_units=units)
        warnings = list(c.warnings)
        masses = c.masses_amu
        if masses is None:
            masses = np.full(c.frames.n_atoms, np.nan)
            warnings.append(f"{path.name}: no masses in the file and no element data; masses unknown")
        return Run(name=path.stem, paths=(path,), topology=c.topology, masses_amu=masses, time_ps=c.time_ps,
                   frames=c.frames, energies=c.energies, metadata=c.metadata, warnings=warnings)
    if entry.name == "mdtraj-hdf5":
        from phasewake.core.readers import mdtraj_hdf5

        return mdtraj_hdf5.open_mdtraj_h5_run(path)
    raise UnknownFormatError(f"reader {entry.name} cannot open a run", path=path)  # pragma: no cover


def _replace_topology(run: Run, top_path: Path) -> Run:
    from phasewake.core.readers import trajectory
    from phasewake.core.readers.common import masses_from_topology

    top = trajectory.load_topology(top_path)
    if top.n_atoms != run.n_atoms:
        raise TopologyMismatchError(f"topology has {top.n_atoms} atoms, the run {run.n_atoms}", path=top_path)
    run.topology = top
    run.metadata.sources["topology"] = top_path.name
    if not np.all(np.isfinite(run.masses_amu)):
        m = masses_from_topology(top, run.n_atoms)
        if m is not None:
            run.masses_amu = m
            run.metadata.sources["masses"] = f"element masses of {top_path.name}"
    return run


def _merge_tables(a: EnergyTable | None, b: EnergyTable, warnings: list[str]) -> EnergyTable:
    """Energy series from the run file and from tables; the table's series win on name clashes."""
    if a is None or len(a) == 0:
        return b
    if len(a) == len(b) and np.allclose(a.time_ps, b.time_ps, rtol=1e-9, atol=1e-9):
        series = {**a.series, **b.series}
        return EnergyTable(time_ps=b.time_ps, series=series, sources=a.sources + b.sources, joins=b.joins)
    warnings.append("the energy tables have another time axis than the run file's observables; "
                    "the tables are used")
    return b


def describe_run(run: Run) -> dict[str, Any]:
    """A summary of what a run holds, every number with its unit (for `phasewake describe`, the window,
    the demo)."""
    from phasewake.core.readers.describe import describe

    return describe(run)


def require_frames(run: Run) -> None:
    """Raise MissingDataError when a run has no frames (an energy table alone)."""
    if run.frames is None:
        raise MissingDataError("this run has no trajectory frames (only an energy table)",
                               path=run.paths[0] if run.paths else None)


__all__ = ["READERS", "ReaderEntry", "describe_run", "file_patterns", "identify", "open_run", "require_frames",
           "supported_formats"]
