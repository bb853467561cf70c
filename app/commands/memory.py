"""``phasewake memory``: how long a run remembers, how many independent samples it holds, and whether
it sampled ergodically.

    phasewake memory FILES... [--series NAME ...] [--coordinate SPEC ...]
                     [--method sokal|geyer|first_zero] [--segments N] [--bins B]
                     [--replica FILE... [--replica FILE... ...]]
                     [--vacf [--group GROUP ...] [--mass-weighted] [--gk-limit PS]
                             [--viscosity MPA_S --box-edge NM]]
                     [--msd [--group GROUP ...] [--fit-range PS PS]]
                     [--spectrum [--group GROUP] [--peak-prominence F]]
                     [--tm [--group GROUP]]
                     [--max-lag PS] [--start N] [--stop N] [--explain] [--json]

Series analysis (``--series`` for a column of the energy table, by name or role such as
``potential``; ``--coordinate`` for any coordinate in the grammar of ``phasewake coords``, e.g.
``"distance(0, 1)"`` or ``"pc(1)"``). For each series:

* the autocorrelation (FFT, zero padded) and the statistical inefficiency g = 1 + 2 sum rho(k) by
  Sokal's automatic window (c = 5), Geyer's initial positive sequence and the first-zero rule
  (``--method`` picks the one used for the other numbers; the default ``auto`` takes Sokal's, or
  Geyer's when the autocorrelation oscillates, compares them and blocking within their standard
  errors, and takes the largest, conservative one when they disagree, saying so); Sokal's
  tau_int = g/2 in ps; the effective sample size N/g and the g-corrected standard error of the mean;
* the blocking (Flyvbjerg-Petersen) standard error with its automatically found plateau;
* the start of equilibrated data (Chodera 2016);
* rank-normalised split R-hat over ``--segments`` contiguous segments (Vehtari et al. 2021), and the
  half-against-half Jensen-Shannon divergence against its null level for the effective sample size;
* the running average with its g-corrected error band (JSON); for a coordinate with a momentum, the
  fraction of a fixed (q, p) grid visited over time (still rising at the end: still exploring);
* with ``--replica`` (repeat for each further replica; each takes that replica's files): R-hat
  across the run and its replicas for the same series.

With no series, coordinate or velocity option, every energy-table column is summarised (or, for a run
without energies, the coordinate chosen automatically, with the reason shown: never a stiff bond or a
constant; a pure liquid has no obvious reaction coordinate and asks for one).

Velocity analysis (needs velocities, stored or estimated by the reader):

* ``--vacf``: velocity autocorrelation per ``--group`` (repeatable; an index, a range ``3-17``, a list
  ``[1, 4, 7-9]`` or a quoted mdtraj atom query ``"name OW"``); the Green-Kubo diffusion coefficient
  with the integration limit chosen automatically (or ``--gk-limit PS``) and reported, with an error
  bar (blocks of time origins and the spread over the plateau), marked unreliable when the VACF decays
  within a frame or two, and compared with the MSD (Einstein) value of the same atoms; with
  ``--viscosity`` (mPa s, of the simulated model) and ``--box-edge`` (nm, cubic box) the Yeh-Hummer
  finite-size correction;
* ``--msd``: mean-squared displacement (unwrapped through the box) and the Einstein diffusion
  coefficient, for comparison;
* ``--spectrum``: vibrational density of states from the mass-weighted VACF (Hann lag window), in
  cm^-1 and THz, with the significant peaks, the resolution and the Nyquist limit;
* ``--tm``: the Thirumalai-Mountain metric of per-atom kinetic energies of a group of equivalent atoms.

``--max-lag PS`` sets the lag window of the VACF/MSD/spectrum (default: half the run, limited by
memory) and the largest lag used for g.

Exit codes: 0 all verdicts ok; 1 a caution or problem was found; 2 unusable input. These diagnostics
are heuristics: your judgement and your group's practice decide.
"""

from __future__ import annotations

import argparse
import sys
import textwrap
from typing import Any

import numpy as np

from phasewake.app.common import WORD_OF, add_run_arguments, open_run_from_args, print_json, run_with_progress

_SKIP_ROLES = ("time", "step")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_run_arguments(parser, threads=True)
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = textwrap.dedent("""\
        examples:
          phasewake memory run.h5md                              every energy term: g, tau_int, N_eff
          phasewake memory run.h5md --series potential --json
          phasewake memory traj.dcd --top top.pdb -c "distance(0, 1)" --segments 4
          phasewake memory rep1.h5md --series potential --replica rep2.h5md --replica rep3.h5md
          phasewake memory run.h5md --vacf --group '"name OW"' --viscosity 0.85 --box-edge 3.1
          phasewake memory run.h5md --spectrum --max-lag 2
        """)
    parser.add_argument("-s", "--series", action="append", default=[], metavar="NAME",
                        help="an energy-table column by name or role (potential, kinetic, total, ...); repeatable")
    parser.add_argument("-c", "--coordinate", action="append", default=[], metavar="SPEC",
                        help="a coordinate in the grammar of 'phasewake coords' (e.g. \"distance(0, 1)\"); repeatable")
    parser.add_argument("--method", choices=("auto", "sokal", "geyer", "first_zero"), default="auto",
                        help="estimator of the statistical inefficiency used for N_eff and errors (default auto: "
                             "Sokal, Geyer on an oscillating autocorrelation, the largest when estimators disagree)")
    parser.add_argument("--segments", type=int, default=4, metavar="N",
                        help="contiguous segments for split R-hat and segment divergences (default 4)")
    parser.add_argument("--bins", type=int, default=50, metavar="B", help="histogram bins for divergences (default 50)")
    parser.add_argument("--replica", action="append", nargs="+", default=[], metavar="FILE",
                        help="files of a replica of the same system (repeat the option per replica): R-hat across runs")
    parser.add_argument("--vacf", action="store_true", help="velocity autocorrelation and Green-Kubo diffusion")
    parser.add_argument("--msd", action="store_true", help="mean-squared displacement and Einstein diffusion")
    parser.add_argument("--spectrum", action="store_true", help="vibrational density of states (cm^-1, THz) and peaks")
    parser.add_argument("--tm", action="store_true", help="Thirumalai-Mountain metric of per-atom kinetic energies")
    parser.add_argument("--no-cache", action="store_true",
                        help="recompute instead of using (and filling) the result cache")
    parser.add_argument("-g", "--group", action="append", default=[], metavar="GROUP",
                        help="atoms for --vacf/--msd/--spectrum/--tm: index, range, [list] or quoted mdtraj query; "
                             "repeat for several groups (default all atoms)")
    parser.add_argument("--mass-weighted", action="store_true", help="mass-weight the VACF of --vacf")
    parser.add_argument("--gk-limit", type=float, default=None, metavar="PS",
                        help="upper limit of the Green-Kubo integral (default: chosen where the VACF has decayed)")
    parser.add_argument("--viscosity", type=float, default=None, metavar="MPA_S",
                        help="shear viscosity of the simulated model (mPa s) for the Yeh-Hummer correction")
    parser.add_argument("--box-edge", type=float, default=None, metavar="NM",
                        help="cubic box edge (nm) for the Yeh-Hummer correction (default: from the first frame)")
    parser.add_argument("--fit-range", type=float, nargs=2, default=None, metavar=("FROM_PS", "TO_PS"),
                        help="time range of the MSD line fit (default 20%%-80%% of the lag window)")
    parser.add_argument("--peak-prominence", type=float, default=0.05, metavar="F",
                        help="a spectral peak is listed when its prominence is at least F x the highest (default 0.05)")
    parser.add_argument("--max-lag", type=float, default=None, metavar="PS", help="lag window in ps")
    parser.add_argument("--start", type=int, default=0, metavar="N", help="first frame / row (0-based)")
    parser.add_argument("--stop", type=int, default=None, metavar="N", help="stop before this frame / row")
    parser.add_argument("--explain", action="store_true",
                        help="print what each verdict measures, how, its threshold and source, and advice")


# ---------------------------------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------------------------------


def _series_inputs(args: argparse.Namespace, run: Any) -> list[tuple[str, str, str]]:
    """(kind, text, reason) of every series asked for: ("series", column name or role, "") or
    ("coordinate", spec, why it was chosen when it was chosen automatically)."""
    out: list[tuple[str, str, str]] = []
    names = list(args.series)
    coords = [(c, "") for c in args.coordinate]
    velocity_mode = args.vacf or args.msd or args.spectrum or args.tm
    if not names and not coords and not velocity_mode:
        if run.energies is not None and run.energies.series:
            names = [k for k, s in run.energies.series.items() if s.role not in _SKIP_ROLES]
        else:
            from phasewake.core.analyses.coordinate_choice import choose_coordinate
            from phasewake.core.errors import MissingDataError

            choice = choose_coordinate(run)
            if choice.spec is None:
                raise MissingDataError(f"the run has no energy table, and {choice.reason}",
                                       path=run.paths[0] if run.paths else None)
            coords = [(choice.spec, choice.reason)]
    out.extend(("series", nm, "") for nm in names)
    out.extend(("coordinate", spec, why) for spec, why in coords)
    return out


def _groups(args: argparse.Namespace, run: Any) -> dict[str, np.ndarray] | None:
    if not args.group:
        return None
    from phasewake.core.analyses.coordinates import resolve_group

    return {text: resolve_group(text, run, option="--group") for text in args.group}


# ---------------------------------------------------------------------------------------------------
# analyses
# ---------------------------------------------------------------------------------------------------


def _analyse_one(item: tuple[str, str, str], args: argparse.Namespace, run: Any, replicas: list[Any],
                 cache: Any) -> dict[str, Any]:
    """The correlation and sampling requests of one series (the same requests as the window and the report)."""
    from phasewake.core.analyses.correlation.request import CorrelationRequest
    from phasewake.core.analyses.sampling import SamplingRequest
    from phasewake.core.store.cached import requested

    kind, text, why = item
    which = {"series": text} if kind == "series" else {"coordinate": text}
    corr = run_with_progress(requested(run, CorrelationRequest(
        **which, method=args.method, max_lag_ps=args.max_lag, start=args.start, stop=args.stop), cache=cache),
        f"autocorrelation of {text}")
    samp = run_with_progress(requested(run, SamplingRequest(
        **which, segments=args.segments, bins=args.bins, method=args.method, max_lag_ps=args.max_lag,
        replicas=tuple(replicas), start=args.start, stop=args.stop), cache=cache), f"sampling of {text}")
    return {
        "name": corr.name, "kind": corr.kind, "source": f"{corr.source}, {why}" if why else corr.source,
        "unit": corr.unit, "correlation": corr.correlation, "g_by_method": corr.g_by_method,
        "blocking": corr.blocking, "equilibration": corr.equilibration, "rhat_segments": samp.rhat_segments,
        "divergence": samp.divergence, "rhat_replicas": samp.rhat_replicas,
        "verdicts": [*corr.verdicts, *samp.verdicts], "running": samp.running, "coverage": samp.coverage,
        "momentum_unit": samp.momentum_unit, "notes": list(corr.notes),
    }


def _velocity_analyses(args: argparse.Namespace, run: Any) -> dict[str, Any]:
    from phasewake.core.analyses import sampling as S
    from phasewake.core.analyses import velocity as V
    from phasewake.core.analyses.ergodicity import ThirumalaiMountainRequest
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import requested

    out: dict[str, Any] = {}
    groups = _groups(args, run)
    cache = ResultCache(enabled=False) if getattr(args, "no_cache", False) else ResultCache()

    if args.vacf:
        kw: dict[str, Any] = dict(groups=groups, mass_weighted=args.mass_weighted, max_lag_ps=args.max_lag,
                                  start=args.start, stop=args.stop)
        vres = run_with_progress(requested(run, V.VACFRequest(**kw), cache=cache), "VACF")
        out["vacf"] = vres
        if not args.mass_weighted:
            fit = tuple(args.fit_range) if args.fit_range else None
            tkw: dict[str, Any] = dict(groups=groups, limit_ps=args.gk_limit, max_lag_ps=args.max_lag,
                                       fit_range_ps=fit, start=args.start, stop=args.stop)
            # the VACF just computed is handed over (not part of the key)
            tr = run_with_progress(requested(run, V.TransportRequest(**tkw, vacf_result=vres), cache=cache),
                                   "Green-Kubo and MSD with block errors")
            out["transport"] = tr
            out["green_kubo"] = list(tr.green_kubo)
            if args.viscosity is not None:
                edge = args.box_edge
                if edge is None and run.frames is not None and run.frames.has_box:
                    box = run.frames.read_frame(0).box_nm
                    if box is not None:
                        edge = float(np.cbrt(abs(np.linalg.det(np.asarray(box[0], float)))))
                temp = run.metadata.temperature_K
                if edge is None or temp is None:
                    from phasewake.core.errors import InputError

                    raise InputError("the Yeh-Hummer correction needs the box edge (--box-edge) and the "
                                     "temperature (--temperature)")
                corr = V.yeh_hummer_correction_nm2_per_ps(temperature_K=temp, viscosity_mPa_s=args.viscosity,
                                                          box_edge_nm=edge)
                out["yeh_hummer"] = {"correction_nm2_per_ps": corr, "box_edge_nm": edge, "temperature_K": temp,
                                     "viscosity_mPa_s": args.viscosity}
    if args.msd:
        kw = dict(groups=groups, max_lag_ps=args.max_lag,
                  fit_range_ps=tuple(args.fit_range) if args.fit_range else None, start=args.start, stop=args.stop)
        out["msd"] = run_with_progress(requested(run, V.MSDRequest(**kw), cache=cache), "MSD")
    if args.spectrum:
        idx = None
        if groups:
            idx = np.unique(np.concatenate(list(groups.values())))
        kw = dict(atom_indices=idx, max_lag_ps=args.max_lag, peak_prominence=args.peak_prominence,
                  start=args.start, stop=args.stop)
        out["spectrum"] = run_with_progress(requested(run, V.SpectrumRequest(**kw), cache=cache), "spectrum")
    if args.tm:
        idx = None
        if groups:
            idx = np.unique(np.concatenate(list(groups.values())))
        tm = run_with_progress(requested(run, ThirumalaiMountainRequest(atom_indices=idx, start=args.start,
                                                                        stop=args.stop), cache=cache),
                               "Thirumalai-Mountain")
        out["tm"] = tm
        out["tm_verdict"] = S.judge_tm(tm)
    return out


# ---------------------------------------------------------------------------------------------------
# output
# ---------------------------------------------------------------------------------------------------


def _series_json(a: dict[str, Any]) -> dict[str, Any]:
    r = a["correlation"]
    d: dict[str, Any] = {"name": a["name"], "kind": a["kind"], "source": a["source"], "unit": a["unit"]}
    d.update(r.to_dict())
    d["g_by_method"] = a["g_by_method"]
    d["acf"] = {"lag_ps": r.acf_lag_ps, "rho": r.acf}
    b = a["blocking"]
    if b is not None:
        d["blocking"] = {"block_size_samples": b.block_size, "n_blocks": b.n_blocks, "sem": b.sem,
                         "sem_error": b.sem_error, "plateau_level": b.plateau_level, "plateau_sem": b.plateau_sem,
                         "plateau_found": b.plateau_found, "unit": b.unit}
    e = a["equilibration"]
    d["equilibration"] = {"t0_index": e.t0_index, "t0_ps": e.t0_ps, "g": e.statistical_inefficiency,
                          "effective_sample_size": e.effective_sample_size,
                          "fraction_discarded": e.fraction_discarded, "method": e.method}
    for key in ("rhat_segments", "rhat_replicas"):
        rh = a[key]
        if rh is not None:
            d[key] = {"rhat": rh.rhat, "bulk": rh.bulk, "tail": rh.tail, "classic_split": rh.classic_split,
                      "n_chains": rh.n_chains, "n_draws": rh.n_draws, "threshold": rh.threshold}
    dv = a["divergence"]
    if dv is not None:
        d["half_divergence"] = {"jsd_nats": dv.half_jsd_nats, "null_nats": dv.half_null_nats,
                                "ratio_to_null": float(dv.ratio[0, 1]), "bins": int(dv.histograms.shape[1]),
                                "n_eff_per_half": dv.n_eff_per_segment}
    ra = a["running"]
    d["running_average"] = {"time_ps": ra.time_ps, "mean": ra.mean, "sem": ra.sem, "unit": ra.unit,
                            "g": ra.statistical_inefficiency}
    cov = a["coverage"]
    if cov is not None:
        d["phase_space_coverage"] = {"time_ps": cov.time_ps, "fraction": cov.fraction,
                                     "grid": f"{cov.visits.shape[0]} x {cov.visits.shape[1]} cells, mean +- 4 sd",
                                     "axes": [a["unit"], a["momentum_unit"]]}
    d["notes"] = list(d.get("notes", [])) + list(a["notes"])
    d["verdicts"] = [v.to_dict() for v in a["verdicts"]]
    return d


def _velocity_json(v: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if "vacf" in v:
        r = v["vacf"]
        out["vacf"] = {"groups": list(r.groups), "n_atoms_per_group": r.n_atoms_per_group, "unit": r.unit,
                       "mass_weighted": r.mass_weighted, "lag_ps": r.lag_ps, "vacf": r.vacf,
                       "velocities_estimated": r.velocities_estimated, "notes": list(r.notes)}
    if "green_kubo" in v:
        out["green_kubo"] = [{"group": g.group, "diffusion_nm2_per_ps": g.diffusion_nm2_per_ps,
                              "diffusion_cm2_per_s": g.diffusion_cm2_per_s, "limit_ps": g.limit_ps,
                              "limit_rule": g.limit_rule, "reliable": g.reliable, "decay_frames": g.decay_frames,
                              "standard_error_nm2_per_ps": g.error_nm2_per_ps,
                              "block_error_nm2_per_ps": g.block_error_nm2_per_ps,
                              "plateau_spread_nm2_per_ps": g.plateau_spread_nm2_per_ps,
                              "block_values_nm2_per_ps": g.block_values_nm2_per_ps} for g in v["green_kubo"]]
    if "transport" in v:
        tr = v["transport"]
        out["transport"] = {"n_blocks": tr.n_blocks, "notes": list(tr.notes),
                            "msd_diffusion_nm2_per_ps": None if tr.msd is None else tr.msd.diffusion_nm2_per_ps,
                            "msd_block_error_nm2_per_ps": list(tr.msd_block_error_nm2_per_ps),
                            "verdicts": [x.to_dict() for x in tr.verdicts]}
    if "yeh_hummer" in v:
        out["yeh_hummer"] = v["yeh_hummer"]
    if "msd" in v:
        m = v["msd"]
        out["msd"] = {"groups": list(m.groups), "lag_ps": m.lag_ps, "msd_nm2": m.msd_nm2,
                      "diffusion_nm2_per_ps": m.diffusion_nm2_per_ps, "fit_range_ps": list(m.fit_range_ps),
                      "unwrapped": m.unwrapped}
    if "spectrum" in v:
        s = v["spectrum"]
        out["spectrum"] = {"wavenumber_cm1": s.wavenumber_cm1, "thz": s.thz, "intensity_per_cm1": s.intensity,
                           "n_dof": s.n_dof, "peaks": [p.__dict__ for p in s.peaks],
                           "highest_significant_peak_cm1": s.highest_significant_peak_cm1,
                           "upper_wavenumber_cm1": s.upper_wavenumber_cm1,
                           "resolution_cm1": s.resolution_cm1, "nyquist_cm1": s.nyquist_cm1,
                           "window": s.window, "velocities_estimated": s.velocities_estimated,
                           "notes": list(s.notes)}
    if "tm" in v:
        t = v["tm"]
        out["thirumalai_mountain"] = {"time_ps": t.time_ps, "omega": t.omega, "omega_unit": f"({t.unit})^2",
                                      "d_per_ps": t.d_per_ps, "late_slope": t.late_slope, "plateau": t.plateau,
                                      "n_particles": t.n_particles, "verdict": v["tm_verdict"].to_dict()}
    return out


def _g(x: float) -> str:
    return f"{x:.4g}"


def _write_series(a: dict[str, Any], w: Any, wrap: textwrap.TextWrapper) -> None:
    r = a["correlation"]
    u = f" {a['unit']}" if a["unit"] else ""
    w(f"\n  {a['name']} [{a['unit'] or 'dimensionless'}] ({a['source']}): {r.n_samples} samples every "
      f"{_g(r.dt_ps)} ps\n")
    gm = a["g_by_method"]
    w(f"    statistical inefficiency g = {_g(r.statistical_inefficiency)} ({r.method}, window {r.window_lags} "
      f"lags); sokal {_g(gm['sokal'])} | geyer {_g(gm['geyer'])} | first-zero {_g(gm['first_zero'])}\n")
    if r.estimates:
        listing = " | ".join(f"{m} {_g(v[0])} +- {v[1]:.2g}" for m, v in r.estimates.items())
        state = "DISAGREE" if r.estimators_disagree else "agree"
        w(f"    estimates with their standard errors: {listing} ({state}: {r.disagreement_z:.1f} standard "
          f"errors apart at most)\n")
    w(f"    tau_int (Sokal, g/2) = {_g(r.tau_int_sokal_ps)} ps; effective samples N/g = "
      f"{r.effective_sample_size:.0f}\n")
    w(f"    mean {_g(r.mean)}{u} +- {_g(r.standard_error_of_mean)}{u} (g-corrected standard error)\n")
    b = a["blocking"]
    if b is not None:
        state = "plateau" if b.plateau_found else "no clear plateau; largest usable"
        w(f"    blocking standard error {_g(b.plateau_sem)}{u} ({state} at blocks of {b.block_size[b.plateau_level]} "
          f"samples; naive {_g(b.naive_sem)})\n")
    e = a["equilibration"]
    w(f"    equilibrated from t0 = {_g(e.t0_ps)} ps ({100 * e.fraction_discarded:.1f}% of the run before it), "
      f"{e.effective_sample_size:.0f} effective samples after\n")
    rh = a["rhat_segments"]
    if rh is not None:
        w(f"    split R-hat over {rh.n_chains} segments {rh.rhat:.4f} (bulk {rh.bulk:.4f}, tail {rh.tail:.4f})\n")
    dv = a["divergence"]
    if dv is not None:
        w(f"    half against half: Jensen-Shannon {dv.half_jsd_nats:.3g} nats, {dv.ratio[0, 1]:.2g}x the noise "
          f"level {dv.half_null_nats:.3g}\n")
    cov = a["coverage"]
    if cov is not None:
        half = cov.fraction[np.searchsorted(cov.time_ps, cov.time_ps[-1] / 2)]
        w(f"    phase-space coverage (q, p) of a {cov.visits.shape[0]} x {cov.visits.shape[1]} grid: "
          f"{100 * half:.1f}% of cells by half time, {100 * cov.fraction[-1]:.1f}% at the end\n")
    rr = a["rhat_replicas"]
    if rr is not None:
        w(f"    R-hat across {rr.n_chains} replicas {rr.rhat:.4f}\n")
    for n in (*r.notes, *a["notes"]):
        w(wrap.fill(f"note: {n}") + "\n")


def _write_velocity(vel: dict[str, Any], w: Any, wrap: textwrap.TextWrapper) -> None:
    if "vacf" in vel:
        r = vel["vacf"]
        w(f"\n  velocity autocorrelation ({'mass-weighted, ' if r.mass_weighted else ''}{r.n_frames} frames, lag window "
          f"{_g(r.lag_ps[-1])} ps, unit {r.unit})\n")
        for i, name in enumerate(r.groups):
            w(f"    group {name}: {int(r.n_atoms_per_group[i])} atoms, C(0) = {_g(r.vacf[i, 0])} {r.unit}\n")
        for g in vel.get("green_kubo", []):
            err = g.error_nm2_per_ps
            pm = "" if err is None else f" +- {err:.2g}"
            flag = "" if g.reliable else "UNRELIABLE (the VACF decays within a frame or two; use the MSD): "
            w(textwrap.fill(f"Green-Kubo D ({g.group}) = {flag}{_g(g.diffusion_nm2_per_ps)}{pm} nm^2/ps = "
                        f"{_g(g.diffusion_cm2_per_s)} cm^2/s, integrated to {_g(g.limit_ps)} ps ({g.limit_rule}); "
                        f"VACF 1/e decay in {g.decay_frames:.3g} frames; error from "
                        + ("no blocks (too few frames)" if g.block_error_nm2_per_ps is None else
                           f"{len(g.block_values_nm2_per_ps)} blocks of time origins (+- "
                           f"{g.block_error_nm2_per_ps:.2g}) and the plateau spread (+- "
                           f"{g.plateau_spread_nm2_per_ps:.2g})"), width=100, initial_indent="    ",
                            subsequent_indent="      ") + "\n")
        tr = vel.get("transport")
        if tr is not None and tr.msd is not None:
            for i, name in enumerate(tr.msd.groups):
                e = tr.msd_block_error_nm2_per_ps[i]
                dm = float(tr.msd.diffusion_nm2_per_ps[i])
                gi = tr.green_kubo[i].diffusion_nm2_per_ps if i < len(tr.green_kubo) else float("nan")
                rel = f"; Green-Kubo is {100 * (gi - dm) / dm:+.0f}% of it" if dm else ""
                w(f"    MSD (Einstein) D ({name}) = {_g(dm)}{'' if e is None else f' +- {e:.2g}'} nm^2/ps, "
                  f"for comparison{rel}\n")
        for n in ([] if tr is None else tr.notes):
            w(wrap.fill(f"note: {n}") + "\n")
        if "yeh_hummer" in vel:
            y = vel["yeh_hummer"]
            w(f"    Yeh-Hummer correction +{_g(y['correction_nm2_per_ps'])} nm^2/ps (L = {_g(y['box_edge_nm'])} nm, "
              f"eta = {_g(y['viscosity_mPa_s'])} mPa s, T = {_g(y['temperature_K'])} K)\n")
        for n in r.notes:
            w(wrap.fill(f"note: {n}") + "\n")
    if "msd" in vel:
        m = vel["msd"]
        for i, name in enumerate(m.groups):
            w(f"\n  mean-squared displacement ({name}): Einstein D = {_g(m.diffusion_nm2_per_ps[i])} nm^2/ps from a "
              f"line fit over {_g(m.fit_range_ps[0])}-{_g(m.fit_range_ps[1])} ps"
              f"{' (unwrapped through the box)' if m.unwrapped else ''}\n")
    if "spectrum" in vel:
        s = vel["spectrum"]
        w(f"\n  vibrational density of states: resolution {_g(s.resolution_cm1)} cm^-1, Nyquist limit "
          f"{_g(s.nyquist_cm1)} cm^-1, {s.window} lag window of {_g(s.max_lag_ps)} ps\n")
        motions = [p for p in s.peaks if not getattr(p, "not_a_motion", "")]
        others = [p for p in s.peaks if getattr(p, "not_a_motion", "")]
        for p in motions:
            w(f"    peak {p.wavenumber_cm1:9.1f} cm^-1 = {p.thz:7.3f} THz   relative prominence {p.prominence:.2f}\n")
        if s.highest_significant_peak_cm1 is not None:
            w(f"    highest significant peak {s.highest_significant_peak_cm1:.1f} cm^-1 (resolved motions only)\n")
        elif not others:
            w("    no significant peak\n")
        else:
            w("    no peak is a resolved motion\n")
        if others:
            w("    not counted as motions:\n")
            for p in others:
                w(wrap.fill(f"{p.wavenumber_cm1:.1f} cm^-1 (relative prominence {p.prominence:.2f}): "
                            f"{p.not_a_motion}") + "\n")
        w(f"    99% of the spectral weight lies below {s.upper_wavenumber_cm1:.1f} cm^-1\n")
        for n in s.notes:
            w(wrap.fill(f"note: {n}") + "\n")
    if "tm" in vel:
        t = vel["tm"]
        w(f"\n  Thirumalai-Mountain metric ({t.n_particles} atoms, {t.quantity}): late log-log slope "
          f"{t.late_slope:.2f} (ergodic: -1), D = {_g(t.d_per_ps)} 1/ps\n")


def _write_verdicts(analyses: list[dict[str, Any]], vel: dict[str, Any], explain: bool, w: Any,
                    wrap: textwrap.TextWrapper) -> None:
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    verdict_list = [v for a in analyses for v in a["verdicts"]]
    if "transport" in vel:
        verdict_list.extend(vel["transport"].verdicts)
    if "tm_verdict" in vel:
        verdict_list.append(vel["tm_verdict"])
    if verdict_list:
        w("\n  verdicts\n")
        for v in verdict_list:
            meas = "-" if v.measured is None else f"{v.measured:.4g} {v.unit}".strip()
            w(f"    {WORD_OF[v.level]:<8} {v.title}: {meas}")
            if v.threshold is not None:
                t = v.threshold
                op = ">" if t.higher_is_worse else "<"
                w(f"   [caution {op} {t.caution:g}, problem {op} {t.problem:g}; {t.source}]")
            w("\n")
            if v.level in ("caution", "problem") and v.advice:
                w(wrap.fill(f"advice: {v.advice}") + "\n")
            if explain and v.kind in EXPLANATIONS:
                ex = EXPLANATIONS[v.kind]
                for part, text in (("what", ex.what), ("method", ex.method), ("threshold", ex.threshold)):
                    w(wrap.fill(f"{part}: {text}") + "\n")


def _write_text(run: Any, analyses: list[dict[str, Any]], vel: dict[str, Any], explain: bool, out: Any) -> None:
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE

    w = out.write
    wrap = textwrap.TextWrapper(width=100, initial_indent="      ", subsequent_indent="      ")
    w(f"phasewake memory: {run.name}\n")
    for text in run.warnings:
        w(textwrap.fill(f"note from reading the files: {text}", width=100, initial_indent="  ",
                        subsequent_indent="    ") + "\n")
    for a in analyses:
        _write_series(a, w, wrap)
    _write_velocity(vel, w, wrap)
    _write_verdicts(analyses, vel, explain, w, wrap)
    w("\n" + textwrap.fill(HEURISTIC_NOTE, width=100, initial_indent="  ", subsequent_indent="  ") + "\n")


def run(args: argparse.Namespace) -> int:
    from phasewake.app.common import run_overrides
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE, worst
    from phasewake.core.readers.stated import open_stated

    run_ = open_run_from_args(args)
    replicas = [open_stated(files, topology=args.top, options=run_overrides(args)) for files in args.replica]
    from phasewake.core.store.cache import ResultCache

    cache = ResultCache(enabled=False) if getattr(args, "no_cache", False) else None
    analyses = [_analyse_one(it, args, run_, replicas, cache) for it in _series_inputs(args, run_)]
    vel = _velocity_analyses(args, run_) if (args.vacf or args.msd or args.spectrum or args.tm) else {}
    levels = [v.level for a in analyses for v in a["verdicts"]]
    if "tm_verdict" in vel:
        levels.append(vel["tm_verdict"].level)
    if "transport" in vel:
        levels.extend(v.level for v in vel["transport"].verdicts)
    if args.json:
        print_json({"run": run_.name, "files": [str(p) for p in run_.paths], "warnings": list(run_.warnings),
                    "series": [_series_json(a) for a in analyses], **_velocity_json(vel),
                    "worst": worst(levels), "note": HEURISTIC_NOTE})
    else:
        _write_text(run_, analyses, vel, args.explain, sys.stdout)
    return 0 if worst(levels) == "ok" else 1
