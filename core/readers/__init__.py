"""The reader layer: :func:`open_run` over the registry of file sources (:mod:`.registry`).

Each reader in :data:`READERS` claims a path ("mine" / "not mine") by content and suffix before
anything is read, and opens what it claimed. A run is built from one self-contained file (H5MD, mdtraj
HDF5) or from a trajectory plus a topology plus energy tables. Opening reads headers, not frames.

Every reader opens its inputs read-only and raises the typed errors of ``phasewake.core.errors``,
naming the file and the fault.
"""

from __future__ import annotations

import contextlib
import struct
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import (
    NO_FRAME_TIMES,
    NUMBERED_ROWS,
    Caveat,
    CorruptFileError,
    InputError,
    MissingDataError,
    ResourceError,
    TopologyMismatchError,
    has_caveat,
)
from phasewake.core.model.run import EnergyTable, Run, RunMetadata
from phasewake.core.readers.engine_common import EnergyOptions
from phasewake.core.readers.registry import (
    READERS,
    ReaderEntry,
    check_file,
    file_patterns,
    identify,
    supported_formats,
)


def apply_stated(md: RunMetadata, overrides: Mapping[str, Any]) -> None:
    """Write what the user states (RunMetadata fields, internal units; None: not stated) over ``md``, each
    marked "user" in ``md.sources`` (``open_run`` does, and the window when a run's settings change)."""
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
    group : H5MD particle group to read (default: the first with positions).
    units : units the user states for quantities whose files give none, by dimension
        ({"length": "A", "time": "fs", "energy": "kcal/mol", "temperature": "K", ...}); used only where a
        file is silent, and listed in the warnings. Units in the files always win.
    units_style : the LAMMPS unit style (lj, real, metal, ...) of a log that echoes no ``units`` command.

    Returns
    -------
    Run
    """
    given = _given_paths(paths, topology, energy_files)
    _refuse_impossible_stated(timestep_ps, n_constraints, temperature_K)  # before any file is read
    inputs = _sort_inputs(given, topology=topology, velocities=velocities)
    run = _open_frames(inputs, group=group, units=units)
    warnings = [*inputs.notes, *run.warnings]
    _keep_later_segments(run)
    options = EnergyOptions(column_roles=column_roles, timestep_ps=timestep_ps,
                            known_timestep_ps=timestep_ps or run.metadata.timestep_ps, assumed_units=units,
                            units_style=units_style)
    _read_energy_files(run, inputs, options, warnings)
    if units_style and run.metadata.units_style is None:  # stated for files that do not say (dumps, tables)
        run.metadata.units_style = f"lammps {units_style}"
        run.metadata.sources["units_style"] = "stated (--units)"
    apply_stated(run.metadata, {"timestep_ps": timestep_ps, "n_constraints": n_constraints,
                                    "temperature_K": temperature_K, "ensemble": ensemble, **metadata})
    _finish_lammps_dump(run, warnings)
    _fixed_cell(run, warnings)
    _attach_velocity_file(run, inputs)
    _estimate_velocities(run, warnings)
    _check_run(run, inputs)
    run.paths = tuple(dict.fromkeys(inputs.paths))
    run.warnings = list(dict.fromkeys(warnings))
    return run


@dataclass
class _Inputs:
    """The files of one run, sorted by what the reader that claims each makes of it."""

    paths: list[Path]  # every file the run is read from, in the order given
    runs: list[tuple[Path, ReaderEntry]] = field(default_factory=list)
    trajectories: list[tuple[Path, ReaderEntry]] = field(default_factory=list)
    topologies: list[tuple[Path, ReaderEntry]] = field(default_factory=list)
    energy: list[tuple[Path, ReaderEntry]] = field(default_factory=list)  # energy and parameter files
    velocity_file: Path | None = None  # velocities beside the positions (NAMD velocity DCD)
    paired_velocities: tuple[Path, ReaderEntry] | None = None  # velocities its positions' reader pairs
    notes: list[str] = field(default_factory=list)


def _given_paths(paths: Sequence[str | Path] | str | Path, topology: str | Path | None,
                 energy_files: Sequence[str | Path] | None) -> list[Path]:
    given = [Path(paths)] if isinstance(paths, str | Path) else [Path(p) for p in paths]
    if topology is not None:
        given.append(Path(topology))
    given += [Path(p) for p in (energy_files or [])]
    if not given:
        raise InputError("no files given")
    return given


def _refuse_impossible_stated(timestep_ps: float | None, n_constraints: int | None,
                              temperature_K: float | None) -> None:
    from phasewake.core.readers.common import check_constraints, check_temperature, check_timestep

    check_timestep(timestep_ps, path=None, where="the time step given (timestep_ps)")
    check_constraints(n_constraints, n_atoms=None, path=None, where="the constraint count given (n_constraints)")
    check_temperature(temperature_K, path=None, where="the temperature given (temperature_K)")


def _is_velocity_name(path: Path) -> bool:
    from phasewake.core.readers.cp2k_xyz import is_velocity_name
    from phasewake.core.readers.velocity_file import is_velocity_file

    return is_velocity_file(path) or is_velocity_name(path)


def _sort_inputs(given: list[Path], *, topology: str | Path | None, velocities: str | Path | None) -> _Inputs:
    notes: list[str] = []
    if any(p.is_dir() for p in given):
        given, notes = _expand_folders(given)
    vel_files = [p for p in given if _is_velocity_name(p)] + ([Path(velocities)] if velocities else [])
    inputs = _Inputs(paths=[p for p in given if not _is_velocity_name(p)], notes=notes)
    if len(vel_files) > 1:
        raise InputError(f"more than one velocity file given ({', '.join(p.name for p in vel_files)}); give one")
    for p in vel_files:
        check_file(p)
    entries = [(p, identify(p)) for p in inputs.paths]
    explicit_top = Path(topology) if topology is not None else None
    inputs.runs = [(p, e) for p, e in entries if e.kind == "run"]
    inputs.trajectories = [(p, e) for p, e in entries if e.kind == "trajectory" and p != explicit_top]
    inputs.topologies = [(p, e) for p, e in entries if e.kind == "topology" or p == explicit_top]
    inputs.energy = [(p, e) for p, e in entries if e.kind in ("energy", "parameters")]
    if len(inputs.runs) + len(inputs.trajectories) > 1:
        _one_run_only(inputs)
    if vel_files:
        # velocities in a file of their own format (CP2K's -vel- xyz) are paired with the positions by
        # the reader of that format, by MD step; others (NAMD velocity DCD) are laid over any positions
        pairing = [e for e in READERS if e.pairs_velocities and e.claim(vel_files[0])]
        if pairing:
            inputs.paired_velocities = (vel_files[0], pairing[0])
        else:
            inputs.velocity_file = vel_files[0]
    return inputs


def _one_run_only(inputs: _Inputs) -> None:
    """Among several frame files, a PDB/GRO next to another trajectory is its topology; a self-contained
    run file is opened alone."""
    trajs = inputs.trajectories
    structural = [(p, e) for p, e in trajs if _is_topology_like(p)]
    if len(trajs) - len(structural) >= 1:
        inputs.trajectories = [(p, e) for p, e in trajs if not _is_topology_like(p)]
        inputs.topologies += structural
    if inputs.runs and (inputs.trajectories or len(inputs.runs) > 1):
        names = ", ".join(p.name for p, _ in inputs.runs + inputs.trajectories)
        raise InputError(f"more than one run file given ({names}); a self-contained run file (H5MD, HDF5) "
                         "is opened alone, one run at a time")


def _open_frames(inputs: _Inputs, *, group: str | None, units: Mapping[str, str] | None) -> Run:
    """The run of the frame files (a run file, trajectories, or a structure file alone), or an empty run
    for energy files alone."""
    if inputs.paired_velocities is not None and not inputs.trajectories:
        vel, entry = inputs.paired_velocities
        raise MissingDataError(f"a velocity file needs its positions file too ({entry.description})", path=vel)
    if inputs.runs:
        path, entry = inputs.runs[0]
        with _unexpected_is_corrupt(path):
            run: Run = entry.open(path, group=group, units=units)
        return _replace_topology(run, inputs.topologies[0][0]) if inputs.topologies else run
    if inputs.trajectories:
        return _open_trajectories(inputs)
    if inputs.topologies:  # a structure file alone (PDB/GRO): one or a few frames
        path, entry = inputs.topologies[0]
        with _unexpected_is_corrupt(path):
            alone: Run = entry.open(path)
        return alone
    if not inputs.energy:
        raise MissingDataError("a velocity file needs the positions trajectory too", path=inputs.velocity_file)
    return Run(name=inputs.energy[0][0].stem, paths=(), topology=None, masses_amu=np.zeros(0),
               time_ps=np.zeros(0), frames=None, energies=None)


def _open_trajectories(inputs: _Inputs) -> Run:
    """The trajectory files as one run: parts joined in time order, each read by the reader that claimed it."""
    trajs = inputs.trajectories
    top_path = inputs.topologies[0][0] if inputs.topologies else None
    if len({e.name for _, e in trajs}) > 1:
        kinds = sorted({e.description.split(" (")[0] for _, e in trajs})
        raise InputError(f"the trajectories {', '.join(p.name for p, _ in trajs)} mix {' with '.join(kinds)}; "
                         "parts of one run are of one format: open one run at a time")
    if inputs.paired_velocities is not None:
        vel, vel_entry = inputs.paired_velocities
        if len(trajs) > 1:
            raise InputError(f"a velocity file ({vel.name}) pairs with one positions file; "
                             f"{len(trajs)} trajectories given")
        path, entry = trajs[0]
        if entry != vel_entry:
            raise MissingDataError(f"this velocity file pairs with positions in its own format "
                                   f"({vel_entry.description}); give that file too", path=vel)
        with _unexpected_is_corrupt(path):
            run: Run = entry.open(path, top_path, velocities=vel)
        inputs.paths.append(vel)
        return run
    parts = []
    for path, entry in trajs:
        with _unexpected_is_corrupt(path):
            parts.append(entry.open(path, top_path))
    if len(parts) == 1:
        return parts[0]
    from phasewake.core.readers.parts import join_runs

    clock = "step" if all(r.metadata.extra.get("time_from") == "step number" for r in parts) else "ps"
    joined, _ = join_runs(parts, clock=clock)
    return joined


def _fixed_cell(run: Run, warnings: list[str]) -> None:
    """A cell an engine's output states (``metadata.extra["cell"]``, e.g. CP2K's MD_INI lines) for frames whose
    files hold none, when it stays fixed."""
    cell = run.metadata.extra.get("cell")
    frames = run.frames
    if not cell or frames is None or frames.has_box or not hasattr(frames, "set_fixed_box"):
        return
    if not cell.get("fixed", False):
        warnings.append(f"the cell of {cell.get('source', 'the output')} changes under the barostat and the frames do "
                        "not hold it: distances are not wrapped")
        return
    import mdtraj

    a, b, c = cell["lengths_nm"]
    alpha, beta, gamma = cell["angles_deg"]
    vecs = mdtraj.utils.lengths_and_angles_to_box_vectors(a, b, c, alpha, beta, gamma)
    frames.set_fixed_box(np.array(vecs, dtype=np.float64))
    run.metadata.sources["box"] = cell.get("source", "engine output")


def _read_energy_files(run: Run, inputs: _Inputs, options: EnergyOptions, warnings: list[str]) -> None:
    """The energy and parameter files: the run's energy table, and what the engine files say of the run
    (the user's overrides win later)."""
    if not inputs.energy:
        return
    from phasewake.core.readers.energy_files import read_energy_sources
    from phasewake.core.readers.engine_common import apply_facts

    with _unexpected_is_corrupt(inputs.energy[0][0] if len(inputs.energy) == 1 else None):
        table, engine_results, table_warnings = read_energy_sources(inputs.energy, options)
    for res in engine_results:
        apply_facts(run.metadata, res.facts, res.source, res.fact_sources)
        for key, val in res.extra.items():  # lists (one entry per part of a run) add up, each entry once
            had = run.metadata.extra.get(key)  # (a log read itself and beside its .edr says the same)
            run.metadata.extra[key] = had + [x for x in val if x not in had] \
                if isinstance(had, list) and isinstance(val, list) else val
    warnings.extend(table_warnings)
    if table is None:
        return
    _refuse_non_finite_time(table)
    run.energies = _merge_tables(run.energies, table, warnings)
    run.metadata.sources["energies"] = ", ".join(Path(p).name for p in table.sources)
    first = inputs.energy[0][0]
    if run.frames is None:
        run.time_ps = table.time_ps
        run.name = first.stem
    elif run.metadata.extra.get("time_from") == "frame index" and len(table) == run.n_frames \
            and not has_caveat(table_warnings, NUMBERED_ROWS):
        # a trajectory without times next to a table with one row per frame: the table's clock
        run.time_ps = table.time_ps
        retime = getattr(run.frames, "retime", None)
        if retime is not None:
            retime(table.time_ps)
        run.metadata.extra["time_from"] = f"{first.name} (one row per frame)"
        warnings[:] = [w for w in warnings if not (isinstance(w, Caveat) and w.code == NO_FRAME_TIMES)]
        warnings.append(f"frame times taken from {first.name}, which has one row per frame")


def _finish_lammps_dump(run: Run, warnings: list[str]) -> None:
    from phasewake.core.readers import lammps_dump

    if lammps_dump.lammps_frames(run.frames):
        with _unexpected_is_corrupt(run.paths[0] if run.paths else None):
            warnings.extend(lammps_dump.finish_run(run))


def _attach_velocity_file(run: Run, inputs: _Inputs) -> None:
    """Velocities from a file of their own laid over the positions' frames (NAMD velocity DCD)."""
    vel = inputs.velocity_file
    if vel is None:
        return
    from phasewake.core.readers.velocity_file import VelocityFileFrames

    if run.frames is None:
        raise MissingDataError("a velocity file needs the positions trajectory too", path=vel)
    with _unexpected_is_corrupt(vel):
        run.frames = VelocityFileFrames(run.frames, vel, run.metadata.sources.get("positions", ""))
    run.metadata.sources["velocities"] = (f"{vel.name} (NAMD velocity DCD: internal units x "
                                          "20.45482706 = Angstrom/ps, full-step)")
    inputs.paths.append(vel)


def _estimate_velocities(run: Run, warnings: list[str]) -> None:
    """Frames without velocities get them by central differences of positions, with what that costs."""
    if run.frames is None or run.frames.has_velocities or run.frames.n_frames < 2:
        return
    from phasewake.core.readers.common import EstimatedVelocityFrames, frame_spacing_warning

    run.frames = EstimatedVelocityFrames(run.frames, run.time_ps)
    temp = run.metadata.temperature_K
    tser = run.energies.by_role("temperature") if run.energies is not None else None
    if temp is None and tser is not None and tser.values.size:
        temp = float(np.nanmean(tser.values))
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


def _check_run(run: Run, inputs: _Inputs) -> None:
    """Every route (any reader, any override): no impossible value reaches an analysis."""
    from phasewake.core.readers.common import check_masses, check_metadata

    first = run.paths[0] if run.paths else (inputs.paths[0] if inputs.paths else None)
    check_metadata(run.metadata, n_atoms=run.n_atoms or None, path=first)
    check_masses(run.masses_amu, path=first, where=run.metadata.sources.get("masses", "masses"))


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
