"""``phasewake open FILES...``: the desktop window on a run (or a saved session)."""

from __future__ import annotations

import argparse

from phasewake.core.errors import PhasewakeError


class WindowUnavailable(PhasewakeError):
    """The desktop window cannot start in this environment (exit 2 with the reason)."""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("files", nargs="*", metavar="FILE",
                        help="trajectory, topology, energy-table, H5MD or mdtraj HDF5 files of one run "
                             "(none: an empty window)")
    from phasewake.app.common import LAMMPS_UNIT_STYLES, add_chunk_argument, add_stated_arguments

    add_stated_arguments(parser, velocities=False,
                         ensemble_note="also in the window: the run's settings under the Runs list")
    parser.add_argument("--units", metavar="STYLE", choices=LAMMPS_UNIT_STYLES, default=None,
                        help="LAMMPS unit style of a dump opened without its log.lammps (the window asks when "
                             "nothing says it)")
    parser.add_argument("--session", metavar="FILE", default=None,
                        help="restore a session saved from the window instead of opening FILES")
    parser.add_argument("--guide", action="store_true", help="show a short guide to the window")
    parser.add_argument("--smoke-test", action="store_true",
                        help="check that the window starts here: open it (offscreen works), wait for the "
                             "panels, print one line and exit (0 when at least one panel was drawn and no "
                             "error was shown)")
    parser.add_argument("--smoke-timeout", metavar="S", type=float, default=60.0,
                        help="seconds the smoke test waits for the panels (default 60)")
    add_chunk_argument(parser)


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from phasewake.core.errors import FileMissingError, SessionError

    for f in args.files:
        if not Path(f).exists():
            raise FileMissingError("no such file", path=f)
    if args.session is not None and not Path(args.session).exists():
        raise SessionError("session file not found", path=args.session)
    from phasewake.app.qt_probe import qt_start_problem

    problem = qt_start_problem()
    if problem is not None:
        raise WindowUnavailable(problem)
    from phasewake.app.common import apply_chunk_budget
    from phasewake.app.window import launch

    apply_chunk_budget(args)
    return launch(args.files, guide=args.guide, topology=args.top, timestep_fs=args.timestep,
                  n_constraints=args.constraints, temperature_K=args.temperature,
                  ensemble=None if args.ensemble is None else args.ensemble.upper(), units_style=args.units,
                  session=args.session,
                  smoke_test=args.smoke_test, smoke_timeout_s=args.smoke_timeout)
