"""Opening runs from Python: the command line's reader road and overrides, as keywords."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

PathLike = str | Path


def sample_path(name: str = "dimer_nve.h5md") -> Path:
    """The path of a bundled sample file (our own scenario: a bistable dimer in an argon-like bath).

    Parameters
    ----------
    name : str
        A file of the package ``phasewake.sample_data``: ``"dimer_nve.h5md"`` (NVE, the default),
        ``"dimer_nve_bigstep.h5md"`` (the same run at too large a time step), ``"dimer_langevin.h5md"``
        (Langevin, with its bath heat), ``"dimer_langevin_r2.h5md"``, ``"dimer_langevin_r3.h5md"``
        (replicas), ``"dimer_nve.dcd"`` + ``"dimer_nve.pdb"`` + ``"dimer_nve_energy.csv"`` (the NVE
        run as a trajectory, topology and energy table).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    phasewake.core.errors.FileMissingError
        No such sample file (the message lists the ones there are).

    Examples
    --------
    >>> import phasewake as pw
    >>> pw.sample_path("dimer_langevin.h5md").name
    'dimer_langevin.h5md'
    """
    from importlib import resources

    from phasewake.core.errors import FileMissingError

    folder = Path(str(resources.files("phasewake.sample_data")))
    path = folder / name
    if not path.is_file() or name.endswith((".py", ".json")) or path.name != name:
        there = sorted(p.name for p in folder.iterdir() if p.suffix in (".h5md", ".dcd", ".pdb", ".csv"))
        raise FileMissingError(f"no sample file named {name!r}; the samples are: {', '.join(there)}", path=folder)
    return path


def _column_roles(columns: Mapping[str, str] | Sequence[str] | None) -> dict[str, str] | None:
    """``columns`` (a mapping NAME -> ROLE, or ``NAME=ROLE`` items as on the command line) as roles."""
    from phasewake.core.readers.stated import column_roles

    if isinstance(columns, str):
        columns = [columns]
    items = [f"{k}={v}" for k, v in columns.items()] if isinstance(columns, Mapping) else columns
    return column_roles(items, option="columns:")


def open(  # pw.open: the name a notebook user expects (shadows the builtin only in this module)
    *paths: PathLike | Sequence[PathLike],
    top: PathLike | None = None,
    velocities: PathLike | None = None,
    timestep_fs: float | None = None,
    ensemble: str | None = None,
    temperature_K: float | None = None,
    constraints: int | None = None,
    units: str | None = None,
    columns: Mapping[str, str] | Sequence[str] | None = None,
) -> Run:
    """Open one run from the files its engine wrote (headers only; frames stay on disk).

    The same reader road as the command line (``phasewake describe FILES ...``): every keyword is the
    option of the same meaning there, and what you state wins over the files and is recorded as
    "user" in ``run.metadata.sources``.

    Parameters
    ----------
    *paths : str or Path, or a list of them
        A self-contained file (H5MD, mdtraj HDF5), or a trajectory plus energy files (``.edr``,
        ``md.log``, ``log.lammps``, an energy table, ...), the parts of a restarted run, or a run folder.
    top : str or Path, optional
        Topology for a trajectory that holds none (PDB, GRO, PSF, PRMTOP, LAMMPS data, ...): ``--top``.
    velocities : str or Path, optional
        Velocities written beside the positions (NAMD velocity DCD): ``--velocities``.
    timestep_fs : float, optional
        The integration time step in fs, when the files do not say: ``--timestep``.
    ensemble : {"nve", "nvt", "npt"}, optional
        How the run was made, when the files do not say: ``--ensemble``.
    temperature_K : float, optional
        The thermostat's target temperature in K (implies a thermostat): ``--temperature``.
    constraints : int, optional
        Number of holonomic constraints (overrides the files and the inference): ``--constraints``.
    units : str, optional
        LAMMPS unit style of a log that does not echo its ``units`` command (``"real"``, ``"metal"``,
        ``"lj"``, ...): ``--units``.
    columns : mapping NAME -> ROLE, optional
        Roles of energy-table columns the files do not name clearly, e.g. ``{"TotEng": "total"}``
        (roles: potential, kinetic, total, conserved, bath_heat, temperature, pressure, volume,
        density, other): ``--column NAME=ROLE``.

    Returns
    -------
    Run
        ``run.name``, ``run.paths``, ``run.n_atoms``, ``run.n_frames``, ``run.time_ps`` (ps),
        ``run.masses_amu``, ``run.energies`` (an energy table in kJ/mol, K, ...), ``run.metadata``.

    Raises
    ------
    phasewake.core.errors.InputError
        A file that cannot be used (missing, empty, truncated, unknown format, ...) or an impossible
        value given; the message names the file or the keyword and the problem.

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_nve.h5md"))
    >>> run.n_atoms, run.n_frames
    (54, 1600)
    >>> run.metadata.ensemble
    'NVE'
    >>> stated = pw.open(pw.sample_path("dimer_nve.h5md"), timestep_fs=2.0)
    >>> stated.metadata.timestep_ps, stated.metadata.sources["timestep_ps"]
    (0.002, 'user')
    """
    from phasewake.core.errors import InputError
    from phasewake.core.readers.stated import open_stated, stated_options

    files: list[str] = []
    for p in paths:
        if isinstance(p, str | Path):
            files.append(str(p))
        else:
            files.extend(str(q) for q in p)
    if not files:
        raise InputError("pw.open: no files given")
    options = stated_options(timestep_fs=timestep_fs, n_constraints=constraints, temperature_K=temperature_K,
                             ensemble=ensemble, velocities=velocities, column_roles=_column_roles(columns),
                             units_style=units)
    return open_stated(files, topology=top, options=options)


def describe(run: Run) -> dict[str, Any]:
    """What a run holds, as ``phasewake describe --json`` prints it: atoms, frames, span, spacing,
    velocities (stored or estimated), energy terms, box, and how the run was made with the source
    of each fact.

    Parameters
    ----------
    run : Run
        From :func:`phasewake.open`.

    Returns
    -------
    dict
        JSON-ready.

    Examples
    --------
    >>> import phasewake as pw
    >>> facts = pw.describe(pw.open(pw.sample_path()))
    >>> facts["n_atoms"], facts["n_frames"]
    (54, 1600)
    """
    from phasewake.core.readers import describe_run
    from phasewake.core.store.jsonable import to_jsonable

    out = to_jsonable(describe_run(run))
    assert isinstance(out, dict)
    return out
