"""``phasewake coords``: coordinates, their momenta and principal components of a run, as a table.

    phasewake coords FILES... --coordinate SPEC [--coordinate SPEC ...] [--momentum]
                     [--pca K [--pca-group GROUP] [--pca-fast] [--no-fit] [--no-mass-weight]]
                     [--start N] [--stop N] [-o out.csv | -o out.h5md] [--json] [--no-cache]

Without ``-o`` the table goes to standard output as CSV. With ``-o out.csv`` it is written there,
with ``-o out.h5md`` (or .h5) as an H5MD 1.1 file holding one ``/observables/<name>`` time series
per column (``value``, ``step``, ``time``, a ``unit`` attribute on each). Then a short summary goes
to standard output (``--json`` for every number with its unit). The output file is written
atomically and never over one of the input files.

Columns: ``time [ps]``, then for each coordinate its value; with ``--momentum`` also its velocity
dq/dt, effective mass and conjugate momentum p = m_eff dq/dt. ``--pca K`` adds the first K principal
components of an atom group (and, with ``--momentum``, their momenta p_k = e_k . M^1/2 v), and a
summary of eigenvalues, explained variance and cosine content.

Coordinates and the ``--pca`` components are kept in the result cache (``phasewake cache``; folder
``PHASEWAKE_CACHE_DIR``, off with ``PHASEWAKE_NO_CACHE=1``), keyed by the input files' identity and the
settings: asking again for the same coordinates of an unchanged file reads no frames. ``--no-cache``
computes afresh and stores nothing.

Exit codes: 0 done; 2 unusable input (a bad coordinate specification points at the offending
character).
"""

from __future__ import annotations

import argparse
import csv
import io
import sys
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.app.common import add_run_arguments, open_run_from_args, print_json, run_with_progress

GRAMMAR_HELP = """\
coordinate specifications (atoms are 0-based; a-b ranges include both ends):
  x(i) y(i) z(i)                  Cartesian component of atom i            nm
  distance(i, j)                  distance (minimum image)                  nm
  angle(i, j, k)                  angle at vertex j                         rad
  dihedral(i, j, k, l)            torsion about j-k, in (-pi, pi]           rad
  com_distance(group_a, group_b)  distance between centres of mass          nm
  rg(group)                       mass-weighted radius of gyration          nm
  rmsd(reference.pdb [, group])   RMSD after optimal superposition          nm
  pc(k [, group])                 k-th principal component (mass-weighted)  nm amu^1/2
a group is an index 7, a range 3-17, a list [1, 4, 7-9], or an atom query in quotes
("name CA and resid 3") written in mdtraj's own selection language (needs a topology).
examples:
  phasewake coords run.h5md --coordinate "distance(0, 1)" --momentum
  phasewake coords traj.dcd --top top.pdb -c 'dihedral(4, 6, 8, 14)' -c 'rg("protein")' -o out.csv
  phasewake coords run.h5md --pca 3 --pca-group 0-9 --momentum -o pcs.h5md
"""

# our unit strings -> H5MD style (space-separated factors with signed integer powers)
_H5MD_UNITS = {
    "ps": "ps", "nm": "nm", "rad": "rad", "nm/ps": "nm ps-1", "rad/ps": "rad ps-1", "amu": "amu",
    "amu nm/ps": "amu nm ps-1", "amu nm^2/rad^2": "amu nm+2 rad-2", "amu nm^2/(rad ps)": "amu nm+2 rad-1 ps-1",
    "1": "",
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser)
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = GRAMMAR_HELP
    parser.add_argument("-c", "--coordinate", action="append", default=[], metavar="SPEC",
                        help="a coordinate to compute (repeat for more); see the list below. Without "
                             "--coordinate or --pca, a sensible first coordinate of the run is used")
    parser.add_argument("--momentum", action="store_true",
                        help="add velocity dq/dt, effective mass and conjugate momentum columns")
    parser.add_argument("--pca", type=int, metavar="K", default=None,
                        help="add the first K principal components of --pca-group")
    parser.add_argument("--pca-group", metavar="GROUP", default=None,
                        help="atoms of the PCA (index, range, [list] or quoted mdtraj query); "
                             "default: every atom that does not look like solvent")
    parser.add_argument("--pca-fast", action="store_true",
                        help="randomized PCA for the leading components, one pass over the data "
                             "(Halko, Martinsson and Tropp 2011; Tropp et al. 2017); approximate")
    parser.add_argument("--pca-passes", type=int, default=1, metavar="N",
                        help="passes of the randomized PCA (more passes: more accurate, slower; default 1)")
    parser.add_argument("--no-fit", action="store_true",
                        help="PCA without superposing frames on the first one (no overall rotation)")
    parser.add_argument("--no-mass-weight", action="store_true", help="PCA of plain Cartesian coordinates")
    parser.add_argument("--start", type=int, default=0, metavar="N", help="first frame (0-based)")
    parser.add_argument("--stop", type=int, default=None, metavar="N", help="stop before this frame")
    parser.add_argument("--no-cache", action="store_true",
                        help="compute the coordinates (and --pca) afresh; neither read nor write the result cache")
    parser.add_argument("-o", "--output", metavar="FILE", default=None,
                        help="write the table to FILE (.csv, or .h5md/.h5 for H5MD observables); "
                             "default: CSV on standard output")


def _columns(args: argparse.Namespace, run: Any) -> tuple[list[tuple[str, str, np.ndarray]], np.ndarray, dict]:
    """Compute everything; returns (name, unit, values) columns, the time axis and a summary."""
    from phasewake.core.analyses.coordinates import CoordinatesRequest, resolve_group
    from phasewake.core.errors import InputError
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import requested

    specs = list(args.coordinate)
    summary: dict[str, Any] = {"run": run.name, "files": [str(p) for p in run.paths], "coordinates": []}
    if not specs and args.pca is None:
        from phasewake.core.analyses.coordinate_choice import choose_coordinate
        from phasewake.core.errors import MissingDataError

        choice = choose_coordinate(run)
        if choice.spec is None:
            raise MissingDataError(choice.reason, path=run.paths[0] if run.paths else None)
        specs = [choice.spec]
        summary["default_coordinate"] = True
        summary["default_coordinate_reason"] = choice.reason
    if args.output is not None:
        out = Path(args.output).resolve()
        for p in run.paths:
            if Path(p).resolve() == out:
                raise InputError("refusing to write the table over an input file", path=args.output)
    cols: list[tuple[str, str, np.ndarray]] = []
    time = None
    if specs:
        series = run_with_progress(
            requested(run, CoordinatesRequest.for_run(run, specs, start=args.start, stop=args.stop,
                                                      mass_weighted_pca=not args.no_mass_weight,
                                                      fit_pca=not args.no_fit),
                      cache=ResultCache(enabled=False) if getattr(args, "no_cache", False) else None),
            "coordinates",
        )
        time = series[0].time_ps
        for s in series:
            cols.append((s.label, s.unit, s.values))
            if args.momentum:
                if s.velocity is not None:
                    cols.append((f"d/dt {s.label}", s.velocity_unit, s.velocity))
                    cols.append((f"m_eff {s.label}", s.m_eff_unit, s.m_eff))
                    cols.append((f"p {s.label}", s.momentum_unit, s.momentum))
            summary["coordinates"].append({
                "spec": s.spec, "label": s.label, "unit": s.unit,
                "mean": float(np.mean(s.values)), "std": float(np.std(s.values)),
                "velocities_estimated": s.velocities_estimated,
            })
    if args.pca is not None:
        from phasewake.core.analyses.projection import PCARequest

        if args.pca < 1:
            raise InputError("--pca needs K >= 1")
        group = None if args.pca_group is None else resolve_group(args.pca_group, run, option="--pca-group")
        res = run_with_progress(
            requested(run, PCARequest(atom_indices=group, start=args.start, stop=args.stop, n_components=args.pca,
                                      mass_weighted=not args.no_mass_weight, fit=not args.no_fit,
                                      method="randomized" if args.pca_fast else "exact",
                                      n_iter=max(0, args.pca_passes - 1)),
                      cache=ResultCache(enabled=False) if getattr(args, "no_cache", False) else None),
            "PCA",
        )
        if time is None:
            time = res.time_ps
        for k in range(res.eigenvalues.shape[0]):
            cols.append((f"pc{k + 1}", res.projection_unit, res.projections[:, k]))
            if args.momentum and res.momenta is not None:
                cols.append((f"p pc{k + 1}", res.momentum_unit, res.momenta[:, k]))
        summary["pca"] = {
            "n_atoms": int(res.atom_indices.size), "method": res.method, "mass_weighted": res.mass_weighted,
            "fit": res.fit, "passes": res.n_iter + 1, "eigenvalues": res.eigenvalues.tolist(), "eigenvalue_unit": res.eigenvalue_unit,
            "explained_variance_ratio": res.explained_variance_ratio.tolist(),
            "cosine_content": None if res.cosine_content is None else res.cosine_content.tolist(),
            "note": "cosine content near 1 suggests random-diffusion-like motion along a component "
                    "(Hess 2002); a heuristic",
        }
    assert time is not None
    summary["n_frames"] = int(time.shape[0])
    summary["columns"] = [{"name": n, "unit": u} for n, u, _ in cols]
    return cols, time, summary


def _write_csv(stream: Any, cols: list[tuple[str, str, np.ndarray]], time: np.ndarray, summary: dict) -> None:
    stream.write(f"# phasewake coords: {summary['run']}\n")
    if summary.get("default_coordinate"):
        stream.write(f"# no --coordinate given: {summary.get('default_coordinate_reason', 'the default coordinate')}\n")
    writer = csv.writer(stream, lineterminator="\n")
    writer.writerow(["time [ps]"] + [f"{n} [{u}]" if u and u != "1" else n for n, u, _ in cols])
    data = np.column_stack([time] + [c for _, _, c in cols])
    for row in data:
        writer.writerow([f"{v:.9g}" for v in row])


def _safe_name(name: str, used: set[str]) -> str:
    base = "".join(ch if ch.isalnum() or ch in "_-." else "_" for ch in name).strip("_") or "column"
    out, k = base, 2
    while out in used:
        out, k = f"{base}_{k}", k + 1
    used.add(out)
    return out


def _write_h5md(path: Path, cols: list[tuple[str, str, np.ndarray]], time: np.ndarray, summary: dict,
                start: int) -> None:
    """An H5MD 1.1 file with observables only (de Buyl, Colberg and Hoefling 2014).

    Built in memory and written in one atomic write: a full disk never reaches the HDF5 library."""
    from phasewake.core import __version__
    from phasewake.core.store.atomic import atomic_hdf5

    with atomic_hdf5(path) as f:
        h = f.create_group("h5md")
        h.attrs["version"] = np.array([1, 1], dtype=np.int32)
        h.create_group("author").attrs["name"] = "phasewake"
        cr = h.create_group("creator")
        cr.attrs["name"] = "phasewake coords"
        cr.attrs["version"] = str(__version__)
        og = f.create_group("observables")
        used: set[str] = set()
        step = np.arange(start, start + time.shape[0], dtype=np.int64)
        first = None
        for name, unit, values in cols:
            g = og.create_group(_safe_name(name, used))
            g.attrs["label"] = name
            ds = g.create_dataset("value", data=np.asarray(values, dtype=np.float64))
            h5unit = _H5MD_UNITS.get(unit, unit)
            if h5unit:
                ds.attrs["unit"] = h5unit
            if first is None:
                st = g.create_dataset("step", data=step)
                tm = g.create_dataset("time", data=np.asarray(time, dtype=np.float64))
                tm.attrs["unit"] = "ps"
                first = (st, tm)
            else:
                g["step"] = first[0]  # shared through HDF5 hard links, as H5MD allows
                g["time"] = first[1]
        p = f.create_group("parameters")
        p.attrs["source_run"] = str(summary["run"])
        p.attrs["source_files"] = ", ".join(summary["files"])


def run(args: argparse.Namespace) -> int:
    if args.output is not None:
        from phasewake.app.common import check_output_path

        check_output_path(args.output, "-o/--output")
    run_ = open_run_from_args(args)
    cols, time, summary = _columns(args, run_)
    if args.output is None and args.json:
        summary["time_ps"] = time
        summary["data"] = [{"name": n, "unit": u, "values": v} for n, u, v in cols]
        print_json(summary)
        return 0
    if args.output is None:
        buf = io.StringIO()
        _write_csv(buf, cols, time, summary)
        sys.stdout.write(buf.getvalue())
        return 0
    out = Path(args.output)
    if out.suffix.lower() in (".h5md", ".h5", ".hdf5"):
        _write_h5md(out, cols, time, summary, args.start)
    else:
        from phasewake.core.store.atomic import atomic_open

        with atomic_open(out, "w", encoding="utf-8", newline="") as fh:
            _write_csv(fh, cols, time, summary)
    summary["output"] = str(out)
    if args.json:
        print_json(summary)
    else:
        sys.stdout.write(f"phasewake coords: {summary['n_frames']} frames, {len(cols)} columns -> {out}\n")
        for c in summary["coordinates"]:
            sys.stdout.write(f"  {c['label']}: mean {c['mean']:.6g} {c['unit']}, std {c['std']:.4g} {c['unit']}"
                             + (" (velocities estimated)" if c["velocities_estimated"] else "") + "\n")
        if "pca" in summary:
            pca = summary["pca"]
            sys.stdout.write(f"  PCA of {pca['n_atoms']} atoms ({pca['method']}):\n")
            for k, (ev, ratio) in enumerate(zip(pca["eigenvalues"], pca["explained_variance_ratio"], strict=True)):
                cc = "" if pca["cosine_content"] is None else f", cosine content {pca['cosine_content'][k]:.2f}"
                sys.stdout.write(f"    pc{k + 1}: eigenvalue {ev:.4g} {pca['eigenvalue_unit']}, "
                                 f"{100 * ratio:.1f}% of the variance{cc}\n")
    return 0
