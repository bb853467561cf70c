"""Helpers shared by the command-line verbs: run arguments, progress bar, JSON output."""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import sys
import time
from collections.abc import Generator
from typing import Any, TypeVar

from phasewake.core.jsonable import to_jsonable
from phasewake.core.progress import Progress, drive

T = TypeVar("T")


def add_run_arguments(parser: argparse.ArgumentParser, *, many: bool = True) -> None:
    """FILES plus the options that say how to read them."""
    parser.add_argument("files", nargs="+" if many else 1, metavar="FILE",
                        help="trajectory, topology, energy-table, H5MD or mdtraj HDF5 files of one run")
    parser.add_argument("--top", metavar="FILE", default=None,
                        help="topology file (PDB, GRO, PSF, PRMTOP, ...) when the trajectory has none")
    parser.add_argument("--velocities", metavar="FILE", default=None,
                        help="velocities written beside the positions (NAMD velocity DCD; files named "
                             "*.veldcd or *.vel.dcd are recognised without this option)")
    parser.add_argument("--timestep", metavar="FS", type=float, default=None,
                        help="integration time step in fs, when the files do not say")
    parser.add_argument("--constraints", metavar="N", type=int, default=None,
                        help="number of holonomic constraints (overrides what the files or inference say)")
    parser.add_argument("--temperature", metavar="K", type=float, default=None,
                        help="thermostat target temperature in K")
    parser.add_argument("--ensemble", choices=("nve", "nvt", "npt"), type=str.lower, default=None,
                        help="the ensemble the run was made in, when the files do not say (a thermostatted run "
                             "is judged by its conserved quantity, not by its total energy)")
    parser.add_argument("--column", metavar="NAME=ROLE", action="append", default=None,
                        help="the role of an energy-table column the files do not name clearly, e.g. "
                             "\"TotEng=total\" (roles: potential, kinetic, total, conserved, bath_heat, "
                             "temperature, pressure, volume, density, other); repeat for more columns")
    parser.add_argument("--units", metavar="STYLE", choices=LAMMPS_UNIT_STYLES, default=None,
                        help="LAMMPS unit style of a log that does not echo its 'units' command (lj real metal si "
                             "cgs electron micro nano; LAMMPS' default is lj); a units command in the log wins")
    parser.add_argument("--json", action="store_true", help="print JSON with every number and its unit")
    add_chunk_argument(parser)


#: LAMMPS unit styles (phasewake.core.readers.lammps_log.STYLES), for --units
LAMMPS_UNIT_STYLES = ("lj", "real", "metal", "si", "cgs", "electron", "micro", "nano")


def _positive_mb(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a positive number of MB, got {text!r}")
    return value


def add_chunk_argument(parser: argparse.ArgumentParser) -> None:
    """``--chunk-mb``: the memory budget of one chunk of frames (``phasewake.core.run.chunk_budget_mb``)."""
    parser.add_argument("--chunk-mb", metavar="MB", type=_positive_mb, default=None,
                        help="memory for one chunk of frames while streaming (default: PHASEWAKE_CHUNK_MB or 128); "
                             "lower it for very large systems or small machines")


def apply_chunk_budget(args: argparse.Namespace) -> None:
    """Use ``--chunk-mb`` for every frame read in this process (no-op when not given)."""
    from phasewake.core.run import set_chunk_budget_mb

    if getattr(args, "chunk_mb", None) is not None:
        set_chunk_budget_mb(args.chunk_mb)


def run_overrides(args: argparse.Namespace) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if getattr(args, "timestep", None) is not None:
        out["timestep_ps"] = args.timestep * 1e-3
    if getattr(args, "constraints", None) is not None:
        out["n_constraints"] = args.constraints
    if getattr(args, "temperature", None) is not None:
        out["temperature_K"] = args.temperature
    if getattr(args, "ensemble", None) is not None:
        out["ensemble"] = args.ensemble.upper()
    if getattr(args, "velocities", None) is not None:
        out["velocities"] = args.velocities  # a file (open_run's own keyword, not metadata)
    out.update(reader_options(args))
    return out


def reader_options(args: argparse.Namespace) -> dict[str, Any]:
    """How to read the files (open_run keywords): ``--column`` roles and the ``--units`` LAMMPS style,
    for every reader of every run a verb opens."""
    out: dict[str, Any] = {}
    roles = column_roles_from_args(args)
    if roles:
        out["column_roles"] = roles
    if getattr(args, "units", None) is not None:
        out["units_style"] = args.units
    return out


def column_roles_from_args(args: argparse.Namespace) -> dict[str, str] | None:
    """``--column NAME=ROLE`` options as a mapping; InputError for a malformed one or an unknown role."""
    from phasewake.core.errors import InputError
    from phasewake.core.run import ENERGY_ROLES

    items = getattr(args, "column", None)
    if not items:
        return None
    roles: dict[str, str] = {}
    for item in items:
        name, sep, role = item.rpartition("=")
        name, role = name.strip(), role.strip().lower()
        if not sep or not name or role not in ENERGY_ROLES:
            raise InputError(f"--column {item!r}: expected NAME=ROLE with ROLE one of {', '.join(ENERGY_ROLES)}")
        roles[name] = role
    return roles


def open_run_from_args(args: argparse.Namespace):  # -> Run
    from phasewake.core.readers import open_run

    apply_chunk_budget(args)
    with quiet_stdout():
        return open_run(args.files, topology=args.top, **run_overrides(args))


@contextlib.contextmanager
def quiet_stdout():
    """Keep library chatter (mdtraj's DCD plugin prints to stdout) out of our output."""
    saved = sys.stdout
    sys.stdout = io.StringIO()
    try:
        yield
    finally:
        sys.stdout = saved


class ProgressBar:
    """A one-line progress bar on stderr, shown only on a terminal."""

    def __init__(self, label: str, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.enabled = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.label = label
        self._last = 0.0

    def __call__(self, p: Progress) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and (p.fraction or 0) < 1:
            return
        self._last = now
        frac = p.fraction
        if frac is None:
            text = f"\r{self.label}: {p.message} {p.done:.0f}"
        else:
            n = int(round(30 * frac))
            text = f"\r{self.label} [{'#' * n}{'.' * (30 - n)}] {100 * frac:5.1f}% {p.message[:40]}"
        self.stream.write(text.ljust(90))
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\r" + " " * 90 + "\r")
            self.stream.flush()


def run_with_progress(work: Generator[Progress, None, T], label: str) -> T:
    from phasewake.core import interrupts

    bar = ProgressBar(label)
    try:
        return drive(work, bar, interrupts.token())  # Ctrl-C / SIGTERM stop the work between chunks
    finally:
        bar.close()


def print_json(obj: Any) -> None:
    sys.stdout.write(json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n")
