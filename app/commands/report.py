"""``phasewake report FILES... -o run-report.pdf``: a multi-page PDF report of a whole run.

The report holds the run's summary and the verdicts table, energy conservation, kinetic temperature,
the velocity spectrum behind the time-step check, the coordinate against time with its phase
portrait, time correlations, sampling and barrier crossings; every figure has a caption with what
was computed and with which settings. ``--html`` writes an HTML page with the same content beside
the PDF (figures embedded as PNG, one self-contained file). With ``--replicas`` each FILE is one
complete run of a replica ensemble: the crossings pages pool their events (as ``phasewake crossings
--replicas``) and add a row per replica (transitions, rates, share of the spread behind R-hat, drift);
the other pages are of the first FILE.

Exit 0 when the report was written (whatever its verdicts say: read them in the report, or use
``phasewake audit`` for an exit code), 2 for unusable input or an output that cannot be written.
"""

from __future__ import annotations

import argparse
import sys

from phasewake.app.common import (
    add_replicas_argument,
    add_run_arguments,
    open_runs_from_args,
    print_json,
    run_with_progress,
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser)
    parser.add_argument("-o", "--output", metavar="PDF", default="run-report.pdf",
                        help="report file to write (default: run-report.pdf in the current folder)")
    parser.add_argument("--html", action="store_true",
                        help="also write an HTML report (same name, .html) with the figures embedded")
    parser.add_argument("--coordinate", metavar="SPEC", default=None,
                        help="coordinate for the phase portrait, correlation, sampling and crossings pages, "
                             "e.g. 'distance(0, 1)' (default: a suggestion from the run's topology)")
    parser.add_argument("--states", metavar="A_HI,B_LO", default=None,
                        help="core sets for the crossings page: A is q <= A_HI, B is q >= B_LO, in the "
                             "coordinate's unit (default: suggested from its free-energy profile)")
    parser.add_argument("--surface", metavar="VALUE", type=float, default=None,
                        help="dividing surface for the crossings page, in the coordinate's unit")
    add_replicas_argument(parser)
    parser.add_argument("--preview", metavar="DIR", default=None,
                        help="also draw each page as PNG into DIR (page-01.png, ...)")
    parser.add_argument("--no-cache", action="store_true",
                        help="compute every analysis afresh; neither read nor write the result cache")


def _states(text: str | None) -> tuple[float, float] | None:
    """``--states A_HI,B_LO`` as two numbers (InputError otherwise; their order is checked in core)."""
    from phasewake.core.errors import InputError

    if text is None:
        return None
    parts = text.replace(";", ",").split(",")
    try:
        a, b = (float(p) for p in parts)
    except ValueError:
        raise InputError(f"--states wants two numbers A_HI,B_LO, got {text!r}") from None
    return a, b


def run(args: argparse.Namespace) -> int:
    from phasewake.app.common import check_output_folder, check_output_path
    from phasewake.core.analyses.coordinates import stated_coordinate
    from phasewake.core.analyses.crossings.states import stated_states
    from phasewake.core.figures.report import build_report, report_targets
    from phasewake.core.readers.stated import stated_settings
    from phasewake.core.store.cache import ResultCache

    out, html_path = report_targets(args.output, html=args.html, inputs=args.files)
    # every output is checked before any analysis runs
    check_output_path(out, "-o/--output")
    if html_path is not None:
        check_output_path(html_path, "--html")
    if args.preview is not None:
        check_output_folder(args.preview, "--preview")
    # options given explicitly are checked before the report is built, so a mistake exits 2 like
    # ``crossings`` and ``coords`` instead of leaving a section out of the report
    states = stated_states(_states(args.states), args.surface)
    run_, *replicas = open_runs_from_args(args)
    if args.coordinate is not None:
        stated_coordinate(args.coordinate, run_)
    result = run_with_progress(
        build_report(run_, out, coordinate=args.coordinate, html_path=html_path,
                     **stated_settings(run_),
                     states=states, surface=args.surface, preview_folder=args.preview,
                     cache=ResultCache(enabled=False) if args.no_cache else None, replicas=replicas),
        "report")
    if args.json:
        print_json({"path": result.path, "html_path": result.html_path, "n_pages": result.n_pages,
                    "sections": list(result.sections), "skipped": [list(s) for s in result.skipped],
                    "verdict_levels": list(result.verdict_levels), "settings": result.settings})
        return 0
    w = sys.stdout.write
    w(f"wrote {result.path} ({result.n_pages} pages)\n")
    if result.html_path is not None:
        w(f"wrote {result.html_path}\n")
    for section, reason in result.skipped:
        w(f"  left out {section}: {reason}\n")
    return 0
