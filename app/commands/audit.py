"""``phasewake audit``: can I trust this run's dynamics?

Energy conservation (drift, fluctuations, events), kinetic temperature and equipartition, canonical
distribution checks, and the time step, each as a verdict with the measured number, the threshold and
its source, and advice. Exit 0 when all is ok, 1 when a caution or problem was found or when nothing could
be checked (said so), 2 only when nothing at all can be read.
"""

from __future__ import annotations

import argparse
import sys
import textwrap
from typing import Any

from phasewake.app.common import (
    WORD_OF,
    add_run_arguments,
    open_run_from_args,
    print_json,
    quiet_stdout,
    reader_options,
    run_with_progress,
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser)
    parser.add_argument("--compare", nargs="+", metavar="OTHER_FILE", default=None,
                        help="files of a second run of the same system at another time step: checks that the "
                             "energy fluctuation scales as (dt1/dt2)^2")
    parser.add_argument("--compare-timestep", metavar="FS", type=float, default=None,
                        help="integration time step of the --compare run in fs, when its files do not say")
    parser.add_argument("--group", action="append", metavar="NAME=ATOMS", default=None,
                        help="a group for the equipartition check, e.g. solute=DIM or core=0-99,120; ATOMS "
                             "is a comma list of residue names and 0-based atom indices or ranges "
                             "(repeat for more groups)")
    parser.add_argument("--explain", action="store_true",
                        help="print what each check measures, how, its threshold and source, and advice")
    parser.add_argument("--no-cache", action="store_true",
                        help="audit afresh; neither read nor write the result cache (default: a repeated audit "
                             "of unchanged files with the same options is read from the cache)")


def _num(x: float | None, unit: str = "") -> str:
    if x is None:
        return "-"
    text = f"{x:.4g}"
    return f"{text} {unit}".strip()


def _threshold_text(v: Any) -> tuple[str, str]:
    t = v.threshold
    if t is None:
        return "-", "-"
    op = ">" if t.higher_is_worse else "<"
    return f"caution {op} {t.caution:g}, problem {op} {t.problem:g} {t.unit}".strip(), t.source


def _write_table(result: Any, out: Any, *, explain: bool, label: str = "") -> None:
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    w = out.write
    head = label or result.run_name
    w(f"phasewake audit: {head}  [ensemble: {result.ensemble}]\n")
    if result.paths:
        w(f"  files: {', '.join(result.paths)}\n")
    if result.ensemble_source:
        w(textwrap.fill(f"ensemble: {result.ensemble}, {result.ensemble_source}", width=100, initial_indent="  ",
                        subsequent_indent="    ") + "\n")
    ea, ta = result.energy, result.temperature
    if ea is not None:
        w(f"  energy judged: {ea.series_label} ({ea.reason})\n")
        if ea.kinetic_source:
            w(f"  kinetic energy for sigma_K: {ea.kinetic_source}\n")
    if ta is not None:
        w(f"  kinetic temperature: {ta.mean_K:.2f} +- {ta.error_K:.2f} K from {ta.kinetic_source}\n")
        w(f"  degrees of freedom: {ta.n_dof} = {ta.atoms_words} - {ta.n_constraints} constraints "
          f"[{ta.constraints_source}] - {ta.n_com_removed} centre of mass [{ta.com_source}]\n")
    w("\n")
    wrap = textwrap.TextWrapper(width=100, initial_indent="      ", subsequent_indent="      ")
    for v in result.verdicts:
        thr, src = _threshold_text(v)
        shown = f": {_num(v.measured, v.unit)}" if v.measured is not None else ""
        w(f"  {WORD_OF[v.level]:<8} {v.title}{shown}\n")
        w(wrap.fill(v.message) + "\n")
        if v.threshold is not None:
            w(wrap.fill(f"threshold: {thr}" + ("" if src in v.message else f" (source: {src})")) + "\n")
        if v.advice:
            w(wrap.fill(f"advice: {v.advice}") + "\n")
        if explain and v.kind in EXPLANATIONS:
            e = EXPLANATIONS[v.kind]
            for part, text in (("what", e.what), ("method", e.method), ("threshold", e.threshold),
                               ("advice", e.advice)):
                w(textwrap.fill(f"{part}: {text}", width=100, initial_indent="        | ",
                                subsequent_indent="        | ") + "\n")
    if ea is not None and ea.events.events:
        w("\n  events (time ps: what):\n")
        for ev in ea.events.events[:20]:
            w(f"    {ev.time_ps:12.6g}: {ev.description}\n")
        if len(ea.events.events) > 20:
            w(f"    ... {len(ea.events.events) - 20} more (see --json)\n")
    if ea is not None and ea.sampling:
        w("\n  effective sample sizes (g = statistical inefficiency, N_eff = n / g):\n")
        for s in ea.sampling:
            w(f"    {s.name:<24} mean {s.mean:12.6g} {s.unit:<7} +- {s.standard_error_of_mean:.3g}   "
              f"g = {s.statistical_inefficiency:7.3g}   N_eff = {s.effective_samples:9.4g} of {s.n_samples}\n")
    if ta is not None and ta.groups:
        w("\n  kinetic temperature per group:\n")
        for g in ta.groups:
            w(f"    {g.name:<24} {g.mean_K:9.2f} +- {g.error_K:.2f} K   N_dof {g.n_dof:.1f}   "
              f"difference {g.difference_K:+.2f} +- {g.difference_error_K:.2f} K"
              f"{'  (significant)' if g.significant else ''}\n")
    for note in result.notes:
        w(textwrap.fill(f"note: {note}", width=100, initial_indent="  ", subsequent_indent="    ") + "\n")
    if result.checked:
        w(f"\n  overall: {WORD_OF[result.level]}\n")
    else:
        w("\n  overall: not checked: nothing could be checked with what the files hold (see the 'not checked' "
          "lines for what each check needs)\n")


def parse_groups(texts: list[str] | None, topology: Any, n_atoms: int) -> dict[str, list[int]]:
    """``NAME=ITEM,ITEM,...`` with items residue names or 0-based atom indices / ranges ``a-b`` (inclusive)."""
    from phasewake.core.errors import InputError

    groups: dict[str, list[int]] = {}
    for text in texts or []:
        name, sep, spec = text.partition("=")
        if not sep or not name.strip() or not spec.strip():
            raise InputError(f"--group {text!r}: expected NAME=ATOMS, e.g. solute=DIM or core=0-99")
        atoms: list[int] = []
        for item in (i.strip() for i in spec.split(",")):
            lo, dash, hi = item.partition("-")
            if lo.isdigit() and (not dash or hi.isdigit()):
                a, b = int(lo), int(hi) if dash else int(lo)
                if not 0 <= a <= b < n_atoms:
                    raise InputError(f"--group {name}: atoms {item} out of range (the run has {n_atoms} atoms)")
                atoms.extend(range(a, b + 1))
                continue
            if topology is None:
                raise InputError(f"--group {name}: residue name {item!r} needs a topology (give --top)")
            found = [a.index for a in topology.atoms if a.residue.name == item]
            if not found:
                names = sorted({r.name for r in topology.residues})
                raise InputError(f"--group {name}: no residue named {item!r} (residues: {', '.join(names[:20])})")
            atoms.extend(found)
        groups[name.strip()] = sorted(set(atoms))
    return groups


def run(args: argparse.Namespace) -> int:
    from phasewake.core.analyses.audit import AuditRequest, audit_summary
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
    from phasewake.core.readers import open_run
    from phasewake.core.readers.stated import stated_settings
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import requested

    the_run = open_run_from_args(args)
    other = None
    if args.compare:
        with quiet_stdout():
            other = open_run(args.compare, topology=args.top, **reader_options(args))
    groups = parse_groups(args.group, the_run.topology, the_run.n_atoms)
    request = AuditRequest(**stated_settings(the_run), groups=groups or None, compare=other,
                           compare_timestep_ps=None if args.compare_timestep is None else args.compare_timestep * 1e-3)
    work = requested(the_run, request, cache=ResultCache(enabled=False) if args.no_cache else None)
    result = run_with_progress(work, request.label)
    if args.json:
        summary = audit_summary(result)
        if args.explain:
            from phasewake.core.analyses.verdicts import EXPLANATIONS

            summary["explanations"] = {v.kind: EXPLANATIONS[v.kind] for v in result.verdicts
                                       if v.kind in EXPLANATIONS}
        print_json(summary)
    else:
        out = sys.stdout
        _write_table(result, out, explain=args.explain)
        if result.compared is not None:
            out.write("\n")
            _write_table(result.compared, out, explain=False, label=f"comparison run {result.compared.run_name}")
        out.write("\n" + textwrap.fill(HEURISTIC_NOTE, width=100) + "\n")
    worst = result.level
    if result.compared is not None and result.compared.level in ("caution", "problem"):
        worst = "problem" if "problem" in (worst, result.compared.level) else "caution"
    if not result.checked:
        return 1  # nothing could be checked: not a pass
    return 0 if worst in ("ok", "info") else 1
