"""The ``phasewake`` command line.

One module per verb in ``phasewake.app.commands`` (``add_arguments(parser)``, ``run(args) -> int``),
listed in :data:`VERBS`. No Qt import at module level: ``phasewake --help`` stays fast.

Exit codes: 0 all well; 1 an analysis found a caution or problem; 2 unusable input (one line on
stderr, no traceback).
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import sys
from collections.abc import Sequence

from phasewake.core import __version__

# verb -> (module, one-line help). Explicit table: no registration by import side effects.
VERBS: dict[str, tuple[str, str]] = {
    "describe": ("phasewake.app.commands.describe", "tell what a run's files hold"),
    "audit": ("phasewake.app.commands.audit", "energy conservation, temperature and time-step checks"),
    "coords": ("phasewake.app.commands.coords", "compute coordinates, momenta and projections as a table"),
    "memory": ("phasewake.app.commands.memory", "autocorrelation, statistical inefficiency, VACF, spectrum, sampling"),
    "crossings": ("phasewake.app.commands.crossings", "barrier crossings, recrossings, dwell times and rates"),
    "report": ("phasewake.app.commands.report", "a PDF (or HTML) report of a whole run"),
    "open": ("phasewake.app.commands.open_window", "open the desktop window on runs"),
    "demo": ("phasewake.app.commands.demo", "the bundled sample run: window, or figures when there is no display"),
    "cache": ("phasewake.app.commands.cache", "show or clear the result cache"),
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="phasewake",
        description="Inspect a finished molecular-dynamics run: energy conservation, temperature, "
        "phase space, memory, sampling and barrier crossings.",
    )
    parser.add_argument("--version", action="version", version=f"phasewake {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="COMMAND")
    for verb, (module_name, help_text) in VERBS.items():
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as exc:
            if exc.name != module_name:
                raise
            continue  # verb not built yet
        p = sub.add_parser(verb, help=help_text, description=help_text[0].upper() + help_text[1:] + ".")
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    from phasewake.core import interrupts
    from phasewake.core.errors import PhasewakeError

    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    # Ctrl-C and SIGTERM are noted and acted on between chunks of work (core/interrupts.py); the window
    # verbs keep Qt's own handling.
    from phasewake.core.store.cache import take_notices

    take_notices()  # notices of earlier work in this process are not this command's
    guard = interrupts.handling() if args.verb not in WINDOW_VERBS else contextlib.nullcontext()
    try:
        with guard:
            try:
                from phasewake.app.common import check_options

                check_options(args)
                code = int(args._run(args))
                interrupts.check()  # a signal noted during the last step still ends the command
                return code
            except PhasewakeError as exc:
                if interrupts.requested() is not None:
                    raise KeyboardInterrupt from None  # Cancelled by the interrupt token
                sys.stderr.write(f"phasewake {args.verb}: {exc}\n")
                return 2
    except MemoryError:
        # an allocation no size check foresaw: one line naming the inputs, never a traceback
        files = ", ".join(str(f) for f in (getattr(args, "files", None) or []))
        sys.stderr.write(f"phasewake {args.verb}: {files + ': ' if files else ''}not enough memory for this "
                         "analysis (try --chunk-mb, --start/--stop or a smaller atom group)\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write(f"phasewake {args.verb}: {interrupts.describe()}\n")
        return interrupts.exit_status()
    except BrokenPipeError:
        # Output piped into a program that stopped reading (e.g. head): not an error of ours.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    finally:
        _print_notices(args.verb)


WINDOW_VERBS = ("open", "demo")


def _print_notices(verb: str) -> None:
    """The result cache's notices ("cache skipped", a damaged entry replaced) as warning lines."""
    from phasewake.core.store.cache import take_notices

    for text in take_notices():
        sys.stderr.write(f"phasewake {verb}: warning: {text}\n")


def window_main() -> int:
    """Entry point of the desktop launcher: the window with no files (or the files given)."""
    return main(["open", *sys.argv[1:]])


if __name__ == "__main__":
    raise SystemExit(main())
