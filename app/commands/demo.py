"""``phasewake demo [--output DIR]``: the bundled sample run.

On a desktop the window opens on the sample run with a short guide. With no display (no DISPLAY or
WAYLAND_DISPLAY on Linux, or Qt set to draw offscreen) it prints one line saying so and writes into
DIR (default ./demo-output) instead:

* ``summary.txt`` and ``summary.json``: what the run holds;
* ``audit.txt`` and ``audit.json``: the verdicts of the energy and temperature audit;
* ``figures/*.png`` and ``figures/*.pdf``: energy, temperature, phase portrait, free-energy profile;
* ``run-report.pdf``: the whole report.

The sample run is a bistable dimer in an argon-like bath (``sample_data/``, see its README), found
in the source folder of a clone or in the installed package ``phasewake.sample_data``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path
from typing import Any

SAMPLE_PREFERENCE = ("dimer_nve.h5md", "dimer_langevin.h5md")
DEMO_COORDINATE = "distance(0, 1)"  # the dimer is atoms 0 and 1 (sample_data/README.md)
DEMO_FIGURES = ("energy.audit", "energy.series", "temperature.audit", "temperature.series", "phase.portrait",
                "report.sampling")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--output", metavar="DIR", default="demo-output",
                        help="folder for the summary, audit, figures and report when there is no display "
                             "(default: ./demo-output)")
    parser.add_argument("--headless", action="store_true",
                        help="write the files even when a display is available, without opening the window")


def sample_folder() -> Path:
    """The folder of the bundled sample run (package ``phasewake.sample_data``)."""
    from importlib import resources

    return Path(str(resources.files("phasewake.sample_data")))


def sample_run_path() -> Path:
    """The sample run to show: the NVE dimer run, else any bundled H5MD file."""
    from phasewake.core.errors import FileMissingError

    folder = sample_folder()
    for name in SAMPLE_PREFERENCE:
        if (folder / name).is_file():
            return folder / name
    found = sorted(folder.glob("*.h5md"))
    if found:
        return found[0]
    raise FileMissingError("the bundled sample run is missing (regenerate it with `make samples`)", path=folder)


def display_available(environ: dict[str, str] | None = None, platform: str | None = None) -> bool:
    """True when a window could be shown: not Linux, or DISPLAY / WAYLAND_DISPLAY set, and Qt not
    told to draw offscreen."""
    env = os.environ if environ is None else environ
    plat = sys.platform if platform is None else platform
    if env.get("QT_QPA_PLATFORM", "").lower() in ("offscreen", "minimal"):
        return False
    if plat.startswith("linux"):
        return bool(env.get("DISPLAY") or env.get("WAYLAND_DISPLAY"))
    return True


def _launcher() -> Any:
    """The window's ``launch`` function, or None when the window cannot be imported (no Qt)."""
    try:
        from phasewake.app.window import launch
    except ImportError:
        return None
    return launch


def run(args: argparse.Namespace) -> int:
    path = sample_run_path()
    if not args.headless and display_available():
        from phasewake.app.qt_probe import qt_start_problem

        problem = qt_start_problem()
        launch = _launcher() if problem is None else None
        if launch is not None:
            return int(launch([str(path)], guide=True))
        reason = problem or "the window cannot start here (Qt is not available)"
    else:
        reason = "no display found" if not args.headless else "headless mode asked for"
    out = Path(args.output)
    from phasewake.app.common import check_output_folder

    check_output_folder(out, "--output")
    sys.stdout.write(f"phasewake demo: {reason}; writing the sample run's summary, audit, figures and report "
                     f"to {out}{os.sep}\n")
    sys.stdout.flush()
    write_demo_output(path, out)
    return 0


def write_demo_output(path: Path, out: Path) -> dict[str, Path]:
    """Write the headless demo files for the run at ``path`` into ``out``; return them by name."""
    from phasewake.app.common import quiet_stdout, run_with_progress
    from phasewake.core.figures.export import export_figure, provenance_of_run, to_jsonable
    from phasewake.core.figures.report import build_report
    from phasewake.core.readers import describe_run, open_run
    from phasewake.core.store.atomic import write_text

    written: dict[str, Path] = {}
    with quiet_stdout():
        run_ = open_run([path])
    desc = describe_run(run_)
    write_text(out / "summary.json", json.dumps(to_jsonable(desc), indent=2) + "\n")
    written["summary.json"] = out / "summary.json"
    write_text(out / "summary.txt", _summary_text(desc))
    written["summary.txt"] = out / "summary.txt"

    result = run_with_progress(build_report(run_, out / "run-report.pdf", coordinate=DEMO_COORDINATE),
                               "demo report")
    written["run-report.pdf"] = result.path

    if result.audit is not None:
        write_text(out / "audit.txt", _audit_text(result.audit))
        written["audit.txt"] = out / "audit.txt"
        verdicts = [v.to_dict() for v in result.audit.verdicts]
        write_text(out / "audit.json", json.dumps(to_jsonable({"run": result.audit.run_name, "verdicts": verdicts,
                                                             "notes": list(result.audit.notes),
                                                             "heuristic_note": result.audit.heuristic_note}),
                                                  indent=2) + "\n")
        written["audit.json"] = out / "audit.json"

    prov = provenance_of_run(run_, settings={"coordinate": DEMO_COORDINATE})
    by_key = {f.key: f for f in result.figures}
    done = set()
    for key in DEMO_FIGURES:
        spec = by_key.get(key)
        base = key.split(".")[0]
        if spec is None or base in done:
            continue
        done.add(base)
        for fmt in ("png", "pdf"):
            name = f"figures/{key.replace('.', '-')}.{fmt}"
            export_figure(spec, out / name, preset="slide", dpi=150, provenance=prov)
            written[name] = out / name
    return written


def _summary_text(desc: dict[str, Any]) -> str:
    try:
        from phasewake.core.readers.describe import format_description
    except ImportError:
        format_description = None
    if format_description is not None:
        text = format_description(desc)
        return text if text.endswith("\n") else text + "\n"
    return "\n".join(f"{k}: {v}" for k, v in desc.items()) + "\n"


def _audit_text(audit: Any) -> str:
    from phasewake.core.figures.plots import verdict_rows

    lines = [f"phasewake audit of {audit.run_name} (ensemble {audit.ensemble})", ""]
    for r in verdict_rows(audit.verdicts):
        measured = f" {r['measured']}" if r["measured"] else ""
        thr = f" [{r['threshold']}; {r['source']}]" if r["threshold"] else ""
        lines.append(f"{r['level'].upper():8s} {r['check']}:{measured}{thr}")
        lines.append(f"         {r['message']}")
        if r["advice"] and r["level"] in ("caution", "problem"):
            lines.append(f"         advice: {r['advice']}")
    lines += ["", audit.heuristic_note, ""]
    return "\n".join(lines)
