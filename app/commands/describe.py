"""`phasewake describe FILES...`: what a run's files hold (atoms, frames, time, velocities, energy terms)."""

from __future__ import annotations

import argparse
import sys

from phasewake.app.common import add_run_arguments, print_json, quiet_stdout, run_overrides


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser, frames=False)
    parser.add_argument("--group", metavar="NAME", default=None,
                        help="H5MD particle group to read (default: the first with positions)")
    parser.add_argument("--unit", metavar="DIMENSION=UNIT", action="append", default=[],
                        help="unit of a quantity the files give none for, e.g. length=A, time=fs, "
                        "energy=kcal/mol (repeatable; units in the files always win)")


def _units(items: list[str]) -> dict[str, str] | None:
    from phasewake.core.errors import UnitError
    from phasewake.core.units import parse_unit

    out: dict[str, str] = {}
    for item in items:
        dim, sep, unit = item.partition("=")
        if not sep or not dim.strip() or not unit.strip():
            raise UnitError(f"--unit {item!r}: write DIMENSION=UNIT, e.g. length=A")
        parse_unit(unit, expect=dim.strip())  # says so now when the unit does not fit the dimension
        out[dim.strip()] = unit.strip()
    return out or None


def run(args: argparse.Namespace) -> int:
    from phasewake.core.readers import describe_run, open_run
    from phasewake.core.readers.describe import format_description
    from phasewake.core.readers.quiet import quiet_c_stdout

    units = _units(args.unit)
    with quiet_stdout(), quiet_c_stdout():
        r = open_run(args.files, topology=args.top, group=args.group, units=units, **run_overrides(args))
    summary = describe_run(r)
    if args.json:
        print_json(summary)
    else:
        sys.stdout.write(format_description(summary) + "\n")
    return 0
