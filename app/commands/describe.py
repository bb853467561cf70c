"""`phasewake describe FILES...`: what a run's files hold (atoms, frames, time, velocities, energy terms)."""

from __future__ import annotations

import argparse
import sys

from phasewake.app.common import add_run_arguments, open_run_from_args, print_json


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser)
    parser.add_argument("--group", metavar="NAME", default=None,
                        help="H5MD particle group to read (default: the first with positions)")


def run(args: argparse.Namespace) -> int:
    from phasewake.core.readers import describe_run
    from phasewake.core.readers.describe import format_description
    from phasewake.core.readers.trajectory import quiet_c_stdout

    if args.group is not None:
        from phasewake.app.common import quiet_stdout, run_overrides
        from phasewake.core.readers import open_run

        with quiet_stdout(), quiet_c_stdout():
            r = open_run(args.files, topology=args.top, group=args.group, **run_overrides(args))
    else:
        with quiet_c_stdout():
            r = open_run_from_args(args)
    summary = describe_run(r)
    if args.json:
        print_json(summary)
    else:
        sys.stdout.write(format_description(summary) + "\n")
    return 0
