"""``phasewake crossings``: barrier crossings, recrossings, transition paths, dwell times and rates.

    phasewake crossings FILES... --coordinate SPEC [--states A_HI,B_LO] [--surface VALUE]
                        [--replicas] [--events events.csv] [--confidence 0.95]
                        [--kappa-window T1,T2] [--json]

States are core sets on the coordinate: A is q <= A_HI (the low side), B is q >= B_LO (the high side);
the dividing surface lies strictly between them. Without ``--states`` they are suggested from the
coordinate's free-energy profile (minima and barrier top); check the suggestion. With ``--replicas``
each FILE is one complete run (e.g. one H5MD file per replica) and their events pool; without it the
FILES together make one run.

``--events`` writes every crossing as a CSV row (time, direction, kind, states, dq/dt, path duration);
the file is written atomically and never over an input file.

Exit codes: 0 done and every check ok; 1 a caution or problem (e.g. few transitions, dwell times that
do not look exponential); 2 unusable input (one line, no traceback).
"""

from __future__ import annotations

import argparse
import csv
import math
import sys
import textwrap
from pathlib import Path
from typing import Any

from phasewake.app.common import (
    WORD_OF,
    add_replicas_argument,
    add_run_arguments,
    open_runs_from_args,
    print_json,
    run_with_progress,
)

EPILOG = """\
examples:
  phasewake crossings run.h5md --coordinate "distance(0, 1)"
  phasewake crossings run.h5md -c "distance(0, 1)" --states 0.42,0.53 --surface 0.475 --events events.csv
  phasewake crossings rep1.h5md rep2.h5md rep3.h5md --replicas -c "distance(0, 1)" --json
  phasewake crossings traj.dcd --top top.pdb -c "dihedral(4, 6, 8, 14)" --states=-2.5,-0.5
values that start with a minus sign need the = form: --states=-2.5,-0.5 --surface=-1.4
"""


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.epilog = EPILOG
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    add_run_arguments(parser, threads=True)
    parser.add_argument("--coordinate", "-c", metavar="SPEC", required=True,
                        help='reaction coordinate, e.g. "distance(0, 1)" (see phasewake coords --help)')
    parser.add_argument("--states", metavar="A_HI,B_LO", default=None,
                        help="core sets: state A is q <= A_HI, state B is q >= B_LO (coordinate units); "
                             "default: suggested from the free-energy profile")
    parser.add_argument("--surface", metavar="VALUE", default=None,
                        help="dividing surface q* between the cores (default: the barrier top, or midway)")
    add_replicas_argument(parser)
    parser.add_argument("--events", metavar="CSV", default=None,
                        help="write the table of every crossing to this CSV file")
    parser.add_argument("--confidence", metavar="P", type=float, default=None,
                        help="coverage of the rate intervals (default 0.95)")
    parser.add_argument("--kappa-window", metavar="T1,T2", default=None,
                        help="lag window in ps over which the reactive-flux kappa(t) is averaged "
                             "(default: from the transition-path durations)")
    parser.add_argument("--no-cache", action="store_true",
                        help="compute afresh; neither read nor write the result cache")


def _floats(text: str, n: int, what: str) -> tuple[float, ...]:
    from phasewake.core.errors import AnalysisError

    parts = [p.strip() for p in text.split(",")]
    try:
        vals = tuple(float(p) for p in parts)
    except ValueError:
        raise AnalysisError(f"{what} must be {n} number(s) separated by a comma, got {text!r}") from None
    if len(vals) != n or not all(math.isfinite(v) for v in vals):
        raise AnalysisError(f"{what} must be {n} finite number(s) separated by a comma, got {text!r}")
    return vals


def _g(x: float, unit: str = "") -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if isinstance(x, float) and math.isinf(x):
        return "inf"
    return f"{x:.4g} {unit}".strip()


def _rate_line(r: Any) -> str:
    if r.upper_bound_only:
        return (f"  k({r.from_state}->{r.to_state}) < {_g(r.ci_high_per_ps, '/ps')}  "
                f"({100 * r.confidence:.0f}% upper limit; 0 transitions in {_g(r.exposure_ps, 'ps')} in "
                f"{r.from_state})")
    return (f"  k({r.from_state}->{r.to_state}) = {_g(r.rate_per_ps, '/ps')}  "
            f"[{_g(r.ci_low_per_ps)}, {_g(r.ci_high_per_ps)}] ({100 * r.confidence:.0f}%)  "
            f"{r.n_transitions} transitions in {_g(r.exposure_ps, 'ps')};  MFPT {_g(r.mfpt_ps, 'ps')}")


def _write_text(res: Any, names: list[str], out: Any) -> None:
    w = out.write
    s = res.settings
    u = s.unit
    w(f"phasewake crossings: {', '.join(names)}\n")
    w(f"  coordinate unit {u}; {res.n_replicas} replica(s), {res.n_samples} frames, "
      f"{_g(res.total_time_ps, 'ps')} ({_g(res.frame_spacing_ps, 'ps')} per frame)\n")
    w(f"  states ({s.states_source}): A is q <= {s.a_hi:.4g}, B is q >= {s.b_lo:.4g} {u}; "
      f"dividing surface q* = {s.surface:.4g} {u}\n")
    if res.suggestion is not None:
        g = res.suggestion
        w(f"  profile: minima at {g.minimum_a:.4g} and {g.minimum_b:.4g} {u}; barrier {g.barrier_from_a_kT:.2f} kT "
          f"from A, {g.barrier_from_b_kT:.2f} kT from B\n")
    if res.unassigned_time_ps > 0:
        w(f"  {_g(res.unassigned_time_ps, 'ps')} before the first core visit (given to the first core reached)\n")
    ev = res.events
    n_cens = int((ev["kind"] == "censored").sum())
    w(f"\n  crossings of q*: {len(ev)}  (transitions {res.n_transitions}, recrossings {res.n_recrossings}, "
      f"censored {n_cens})\n")
    w(f"  dq/dt at crossings: {res.velocity_source}\n")
    w("\n  rates = transitions / time in the origin state, exact Poisson intervals (Garwood 1936):\n")
    w(_rate_line(res.rate_ab) + "\n")
    w(_rate_line(res.rate_ba) + "\n")
    pt = res.path_times
    if pt.n:
        w(f"\n  transition paths: {pt.n}; mean {_g(pt.mean_ps, 'ps')} +- {_g(pt.sem_ps)}, median "
          f"{_g(pt.median_ps, 'ps')} ({pt.median_frames:.1f} frames)\n")
    k = res.kappa
    w(f"\n  transmission coefficient: counting {_g(k.counting)} (A->B {_g(k.counting_up)}, "
      f"B->A {_g(k.counting_down)})\n")
    w(f"    reactive flux kappa(t) plateau {_g(k.plateau)} over {k.plateau_window_ps[0]:.4g}-"
      f"{k.plateau_window_ps[1]:.4g} ps (uncorrected {_g(k.plateau_raw)})\n")
    if res.tst is not None:
        t = res.tst.tst
        w(f"    TST ({t.flux_source}): k_TST(A->B) = {_g(t.rate_up_per_ps, '/ps')}, "
          f"k_TST(B->A) = {_g(t.rate_down_per_ps, '/ps')};  k/k_TST = {_g(res.tst.kappa_up)} and "
          f"{_g(res.tst.kappa_down)}\n")
    if res.n_replicas > 1 and res.replicas:
        _write_replicas(res, w)
    w("\n")
    wrap = textwrap.TextWrapper(width=100, initial_indent="      ", subsequent_indent="      ")
    for v in res.verdicts:
        w(f"  {WORD_OF[v.level]:<8} {v.title}: {_g(v.measured, v.unit)}\n")
        w(wrap.fill(v.message) + "\n")
        if v.threshold is not None:
            op = ">" if v.threshold.higher_is_worse else "<"
            w(wrap.fill(f"threshold: caution {op} {v.threshold.caution:g}, problem {op} "
                        f"{v.threshold.problem:g} (source: {v.threshold.source})") + "\n")
    for msg in res.warnings:
        w(textwrap.fill(f"warning: {msg}", width=100, initial_indent="  ", subsequent_indent="    ") + "\n")
    w("\n" + textwrap.fill(res.note, width=100) + "\n")


def _write_replicas(res: Any, w: Any) -> None:
    """One line per replica (core/analyses/replica_table.py): its transitions, rates, share of the
    between-replica spread of the mean (what raises R-hat) and drift."""
    u = res.settings.unit
    w(f"\n  per replica: transitions, rates (/ps), share of the between-replica spread of the mean q "
      f"(R-hat), drift of q ({u}/ns)\n")
    w(f"    {'replica':<24} {'ps':>9} {'A->B':>5} {'B->A':>5} {'k(A->B)':>10} {'k(B->A)':>10} "
      f"{'mean q':>9} {'share':>6} {'drift':>10}\n")
    for r in res.replicas:
        share = "-" if math.isnan(r.between_share) else f"{100 * r.between_share:.0f}%"
        w(f"    {r.name[:24]:<24} {r.time_ps:>9.4g} {r.transitions_ab:>5} {r.transitions_ba:>5} "
          f"{_g(r.rate_ab_per_ps):>10} {_g(r.rate_ba_per_ps):>10} {r.mean:>9.4g} {share:>6} "
          f"{_g(r.drift_per_ns):>10}\n")


def _write_events(path: Path, res: Any, names: list[str], inputs: list[Path]) -> None:
    from phasewake.core.errors import InputError
    from phasewake.core.store.atomic import OutputError

    target = path.resolve()
    for p in inputs:
        if p.exists() and p.resolve() == target:
            raise InputError("refusing to write the events table over an input file", path=path)
    try:
        _write_events_rows(path, res, names)
    except OutputError as exc:
        raise OutputError(exc.problem.replace("cannot write:", "cannot write the events table:", 1),
                          path=path) from None


def _write_events_rows(path: Path, res: Any, names: list[str]) -> None:
    from phasewake.core.store.atomic import atomic_open

    u = res.velocity_unit
    with atomic_open(path, "w", encoding="utf-8", newline="") as fh:
        wr = csv.writer(fh)
        wr.writerow(["index", "replica", "run", "frame", "time (ps)", "direction", "kind", "from_state",
                     "to_state", f"velocity ({u})", "path_duration (ps)"])
        for r in res.events:
            wr.writerow([int(r["index"]), int(r["replica"]), names[int(r["replica"])], int(r["frame"]),
                         repr(float(r["time_ps"])), int(r["direction"]), str(r["kind"]), str(r["from_state"]),
                         str(r["to_state"]), repr(float(r["velocity"])),
                         "" if math.isnan(r["path_duration_ps"]) else repr(float(r["path_duration_ps"]))])


def run(args: argparse.Namespace) -> int:
    from phasewake.core.analyses.crossings import CrossingsRequest
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import requested

    if args.events:
        from phasewake.app.common import check_output_path

        check_output_path(args.events, "--events", "the events table")
    states = None if args.states is None else _floats(args.states, 2, "--states")
    surface = None if args.surface is None else _floats(args.surface, 1, "--surface")[0]
    window = None if args.kappa_window is None else _floats(args.kappa_window, 2, "--kappa-window")
    if args.confidence is not None and not 0.0 < args.confidence < 1.0:
        from phasewake.core.errors import AnalysisError

        raise AnalysisError(f"--confidence must lie between 0 and 1, got {args.confidence}")
    runs = open_runs_from_args(args)
    # only what the user gave: every default (and the temperature, which --temperature set on the runs)
    # is the request's own, so the window and the report build the same request for the same run
    given = {k: v for k, v in (("states", states), ("surface", surface), ("confidence", args.confidence),
                               ("kappa_window_ps", window)) if v is not None}
    request = CrossingsRequest(coordinate=args.coordinate, replicas=tuple(runs[1:]), **given)
    work = requested(runs[0], request,
                     cache=ResultCache(enabled=False) if getattr(args, "no_cache", False) else None)
    res = run_with_progress(work, "crossings")
    names = [r.name for r in runs]
    if args.events:
        _write_events(Path(args.events), res, names, [Path(f) for f in args.files])
    if args.json:
        d = res.to_dict()
        d["runs"] = names
        d["coordinate"] = args.coordinate
        if args.events:
            d["events_file"] = str(args.events)
        print_json(d)
    else:
        _write_text(res, names, sys.stdout)
        if args.events:
            sys.stdout.write(f"events table: {args.events}\n")
    levels = [v.level for v in res.verdicts]
    return 1 if any(lv in ("caution", "problem") for lv in levels) else 0
