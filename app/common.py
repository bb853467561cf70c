"""Helpers shared by the command-line verbs: run arguments, progress bar, JSON output."""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import sys
import time
from collections.abc import Generator
from pathlib import Path
from typing import Any, TypeVar

from phasewake.core.progress import Progress, drive
from phasewake.core.store.jsonable import to_jsonable

T = TypeVar("T")

#: how the command line writes a verdict level (the two that need attention in capitals)
WORD_OF = {"ok": "ok", "caution": "CAUTION", "problem": "PROBLEM", "info": "info"}


def add_run_arguments(parser: argparse.ArgumentParser, *, many: bool = True, frames: bool = True,
                      threads: bool = False) -> None:
    """FILES plus the options that say how to read them (and ``--threads`` for verbs with long kernels)."""
    parser.add_argument("files", nargs="+" if many else 1, metavar="FILE",
                        help="trajectory, topology, energy-table, H5MD or mdtraj HDF5 files of one run")
    add_stated_arguments(parser)
    parser.add_argument("--column", metavar="NAME=ROLE", action="append", default=None,
                        help="the role of an energy-table column the files do not name clearly, e.g. "
                             "\"TotEng=total\" (roles: potential, kinetic, total, conserved, bath_heat, "
                             "temperature, pressure, volume, density, other); repeat for more columns")
    parser.add_argument("--units", metavar="STYLE", choices=LAMMPS_UNIT_STYLES, default=None,
                        help="LAMMPS unit style of a log that does not echo its 'units' command (lj real metal si "
                             "cgs electron micro nano; LAMMPS' default is lj); a units command in the log wins")
    parser.add_argument("--json", action="store_true", help="print JSON with every number and its unit")
    add_chunk_argument(parser)
    if frames:
        add_parallel_arguments(parser)
    if threads:
        add_threads_argument(parser)


def add_stated_arguments(parser: argparse.ArgumentParser, *, velocities: bool = True,
                         ensemble_note: str = "a thermostatted run is judged by its conserved quantity, not by "
                                              "its total energy") -> None:
    """``--top`` and what a user may state about a run (``phasewake.core.readers.stated``): ``--velocities``,
    ``--timestep``, ``--constraints``, ``--temperature``, ``--ensemble``."""
    from phasewake.core.readers.stated import ENSEMBLES

    parser.add_argument("--top", metavar="FILE", default=None,
                        help="topology file (PDB, GRO, PSF, PRMTOP, ...) when the trajectory has none")
    if velocities:
        parser.add_argument("--velocities", metavar="FILE", default=None,
                            help="velocities written beside the positions (NAMD velocity DCD; files named "
                                 "*.veldcd or *.vel.dcd are recognised without this option)")
    parser.add_argument("--timestep", metavar="FS", type=float, default=None,
                        help="integration time step in fs, when the files do not say")
    parser.add_argument("--constraints", metavar="N", type=int, default=None,
                        help="number of holonomic constraints (overrides what the files or inference say)")
    parser.add_argument("--temperature", metavar="K", type=float, default=None,
                        help="thermostat target temperature in K")
    parser.add_argument("--ensemble", choices=ENSEMBLES, type=str.lower, default=None,
                        help=f"the ensemble the run was made in, when the files do not say ({ensemble_note})")


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
    """``--chunk-mb``: the memory budget of one chunk of frames (``phasewake.core.settings.chunk_budget_mb``)."""
    parser.add_argument("--chunk-mb", metavar="MB", type=_positive_mb, default=None,
                        help="memory for one chunk of frames while streaming (default: PHASEWAKE_CHUNK_MB or 128); "
                             "lower it for very large systems or small machines")


def _at_least_one(unit: str, units: str):
    """An argparse type: a whole number, 1 or more, of ``units``, named in the message."""
    def parse(text: str) -> int:
        try:
            n = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"a whole number of {units}, got {text!r}") from None
        if n < 1:
            raise argparse.ArgumentTypeError(f"at least 1 {unit}, got {n}")
        return n

    parse.__name__ = f"number of {units}"  # argparse names the type in some messages
    return parse


def add_parallel_arguments(parser: argparse.ArgumentParser) -> None:
    """``--workers`` and ``--scheduler`` (``phasewake.core.model.parallel``, ``cluster``)."""
    from phasewake.core.model.parallel import usable_cores

    parser.add_argument("--workers", metavar="N", type=_at_least_one("process", "processes"), default=None,
                        help="processes reading frames in parallel (default: for XTC, TRR and DCD, whose "
                             f"decoding is the bottleneck, the usable cores ({usable_cores()} here) on passes "
                             "over many frames; 1 for H5MD and other files read at memory speed; "
                             "PHASEWAKE_WORKERS sets it too); memory per worker stays within --chunk-mb")
    parser.add_argument("--scheduler", metavar="ADDRESS", default=None,
                        help="send frame ranges and replicas to a running Dask scheduler (tcp://host:8786); "
                             "its workers must see the files at the same paths and run this phasewake version")


def apply_parallel(args: argparse.Namespace) -> None:
    """Use ``--workers``, ``--scheduler`` and ``--threads`` (where the verb has them) for every frame pass
    and long kernel in this process."""
    from phasewake.core.model import cluster, parallel

    apply_threads(args)

    parallel.set_workers(getattr(args, "workers", None))  # given or not: never an earlier command's
    address = getattr(args, "scheduler", None) or None
    if address != cluster.scheduler():
        cluster.set_scheduler(address)


def apply_chunk_budget(args: argparse.Namespace) -> None:
    """Use ``--chunk-mb`` for every frame read in this process (no-op when not given)."""
    from phasewake.core.settings import set_chunk_budget_mb

    if getattr(args, "chunk_mb", None) is not None:
        set_chunk_budget_mb(args.chunk_mb)


# dest -> (option, what it must be, unit). Checked by check_options on every verb that has the option.
_POSITIVE = {
    "timestep": ("--timestep", "fs"), "compare_timestep": ("--compare-timestep", "fs"),
    "temperature": ("--temperature", "K"), "max_lag": ("--max-lag", "ps"), "gk_limit": ("--gk-limit", "ps"),
    "viscosity": ("--viscosity", "mPa s"), "box_edge": ("--box-edge", "nm"),
    "peak_prominence": ("--peak-prominence", ""),
}
_FINITE = {"surface": ("--surface", "")}
_MIN_INT = {"constraints": ("--constraints", 0), "bins": ("--bins", 2), "segments": ("--segments", 2),
            "pca": ("--pca", 1), "pca_passes": ("--pca-passes", 1), "start": ("--start", 0), "stop": ("--stop", 0)}
# a histogram with more bins than this holds no information and numpy cannot allocate 1e26 of them
_MAX_INT = {"bins": ("--bins", 10**6)}


def check_options(args: argparse.Namespace) -> None:
    """Refuse impossible numeric options by name before any file is read (InputError: one line, exit 2).

    NaN, infinite, zero or negative where only a positive number makes sense (``--timestep nan``,
    ``--max-lag nan``, ``--gk-limit inf``), a negative constraint count, fewer than 2 histogram bins.
    """
    import math

    from phasewake.core.errors import InputError

    for dest, (option, unit) in _POSITIVE.items():
        value = getattr(args, dest, None)
        if isinstance(value, float | int) and not (math.isfinite(value) and value > 0):
            raise InputError(f"{option} {value:g}: expected a positive number" + (f" of {unit}" if unit else ""))
    for dest, (option, _unit) in _FINITE.items():
        value = getattr(args, dest, None)
        if isinstance(value, float) and not math.isfinite(value):
            raise InputError(f"{option} {value:g}: expected a finite number")
    for dest, (option, least) in _MIN_INT.items():
        value = getattr(args, dest, None)
        if isinstance(value, int) and not isinstance(value, bool) and value < least:
            raise InputError(f"{option} {value}: expected a whole number of at least {least}")
    for dest, (option, most) in _MAX_INT.items():
        value = getattr(args, dest, None)
        if isinstance(value, int) and not isinstance(value, bool) and value > most:
            raise InputError(f"{option} {value}: expected a whole number of at most {most}")
    fit = getattr(args, "fit_range", None)
    if fit is not None and not (all(math.isfinite(v) for v in fit) and 0 <= fit[0] < fit[1]):
        raise InputError(f"--fit-range {fit[0]:g} {fit[1]:g}: expected two finite times 0 <= FROM < TO in ps")


def check_output_path(path: str | Path, option: str, what: str = "") -> Path:
    """Refuse an output that cannot be written, before any analysis runs (InputError naming the option).

    An existing folder where a file is wanted, a folder on the way that is a file, a folder without
    write permission (a missing folder is made by the writer where its parent permits). Writing itself stays with the atomic writer (core/store/atomic.py).
    """
    from phasewake.core.errors import InputError

    p = Path(path)
    if p.is_dir():
        raise InputError(f"{option}: {p} is a folder; give a file name", path=None)
    folder = p.parent if str(p.parent) else Path(".")
    _check_folder_writable(folder, option, p, what)
    return p


def check_output_folder(path: str | Path, option: str) -> Path:
    """Like check_output_path for an output folder: an existing writable folder, or one that can be made."""
    from phasewake.core.errors import InputError

    p = Path(path)
    if p.exists() and not p.is_dir():
        raise InputError(f"{option}: {p} is a file, not a folder")
    _check_folder_writable(p, option, p)
    return p


def _check_folder_writable(folder: Path, option: str, target: Path, what: str = "") -> None:
    import os

    from phasewake.core.errors import InputError

    target_text = f"{what} {target}" if what else str(target)
    probe = folder  # a missing folder is made by the writer, with its parents: the nearest existing one decides
    while not probe.exists() and probe != probe.parent:
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise InputError(f"{option}: cannot write {target_text}: {probe} is a file, not a folder")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise InputError(f"{option}: cannot write {target_text}: permission denied in the folder {probe}")


def run_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """``open_run`` keywords of the run options (``phasewake.core.readers.stated.stated_options``)."""
    from phasewake.core.readers.stated import stated_options

    return stated_options(timestep_fs=getattr(args, "timestep", None), n_constraints=getattr(args, "constraints", None),
                          temperature_K=getattr(args, "temperature", None), ensemble=getattr(args, "ensemble", None),
                          velocities=getattr(args, "velocities", None), **reader_options(args))


def reader_options(args: argparse.Namespace) -> dict[str, Any]:
    """How to read the files (open_run keywords): ``--column`` roles and the ``--units`` LAMMPS style,
    for every reader of every run a verb opens."""
    from phasewake.core.readers.stated import column_roles

    out: dict[str, Any] = {}
    roles = column_roles(getattr(args, "column", None), option="--column")
    if roles:
        out["column_roles"] = roles
    if getattr(args, "units", None) is not None:
        out["units_style"] = args.units
    return out


def open_run_from_args(args: argparse.Namespace):  # -> Run
    from phasewake.core.readers.stated import open_stated

    apply_chunk_budget(args)
    apply_parallel(args)
    return open_stated(args.files, topology=args.top, options=run_overrides(args))


def add_replicas_argument(parser: argparse.ArgumentParser) -> None:
    """``--replicas``: each FILE is a complete run of its own (read by :func:`open_runs_from_args`)."""
    parser.add_argument("--replicas", action="store_true",
                        help="each FILE is a separate replica run; their events pool")


def open_runs_from_args(args: argparse.Namespace) -> list:  # -> list[Run]
    """The run of FILES, or with ``--replicas`` one run per FILE (the first is the ensemble's own run)."""
    from phasewake.core.readers.stated import open_stated

    if not getattr(args, "replicas", False):
        return [open_run_from_args(args)]
    apply_chunk_budget(args)
    apply_parallel(args)
    return [open_stated([f], topology=args.top, options=run_overrides(args)) for f in args.files]


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


def add_threads_argument(parser: argparse.ArgumentParser) -> None:
    """``--threads N``: threads of the long numpy kernels (:mod:`phasewake.core.settings`)."""
    parser.add_argument("--threads", metavar="N", type=_at_least_one("thread", "threads"), default=None,
                        help="threads of the long computations (default: every core this process may use); "
                             "the numbers do not depend on it")


def apply_threads(args: argparse.Namespace) -> None:
    if getattr(args, "threads", None) is not None:
        from phasewake.core.settings import set_threads

        set_threads(args.threads)
