"""The benchmark cases. Each returns an Outcome with a same-run baseline and a target.

Synthetic data is made on the fly in the run's work folder and shared between cases.
Full sizes (``--full``, see ``_sizes``): 20,000 atoms x 2,200 frames of positions + velocities in
H5MD (1.06 GB), a 1.6 GB DCD, a 1e7-row energy table, a 1e8-sample coordinate, a 3,000-coordinate
PCA over 1e5 frames (1.2 GB). Quick sizes run the same code on small data in `make test`.

Baseline and measurement of a case are the best of the same number of runs: on a loaded machine a
minimum over more runs is lower, so unequal repeats biased the ratios (fixed 2026-12-01).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from tests.benchmarks.harness import Outcome, best_of, case, finish


def _sizes(full: bool) -> dict[str, int]:
    if full:
        return {"atoms": 20_000, "frames": 2_200, "pca_atoms": 1_000, "pca_frames": 100_000,
                "table_rows": 10_000_000, "series": 100_000_000, "acf": 10_000_000,
                "many_series": 1_000, "many_len": 100_000, "plot_points": 10_000_000}
    return {"atoms": 500, "frames": 200, "pca_atoms": 100, "pca_frames": 2_000,
            "table_rows": 100_000, "series": 1_000_000, "acf": 100_000,
            "many_series": 20, "many_len": 10_000, "plot_points": 100_000}


def _rng() -> np.random.Generator:
    return np.random.default_rng(20261201)


def make_h5md(path: Path, n_atoms: int, n_frames: int, *, velocities: bool = True, chunk: int = 100) -> Path:
    """An H5MD 1.1 file (spec layout, de Buyl et al. 2014) written frame-block by block with h5py."""
    import h5py

    if path.exists():
        return path
    rng = _rng()
    tmp = path.with_suffix(".part")
    with h5py.File(tmp, "w") as f:
        f.create_group("h5md").attrs["version"] = np.array([1, 1])
        f["h5md"].create_group("author").attrs["name"] = "bench"
        cr = f["h5md"].create_group("creator")
        cr.attrs["name"] = "phasewake-bench"
        cr.attrs["version"] = "0"
        g = f.create_group("particles/all")
        box = g.create_group("box")
        box.attrs["dimension"] = 3
        box.attrs["boundary"] = np.array([b"periodic"] * 3)
        box.create_dataset("edges", data=np.full(3, 10.0)).attrs["unit"] = "nm"
        g.create_dataset("mass", data=np.full(n_atoms, 39.948)).attrs["unit"] = "u"
        names = ["position"] + (["velocity"] if velocities else [])
        base = rng.uniform(0, 10, size=(n_atoms, 3)).astype(np.float32)
        for name in names:
            e = g.create_group(name)
            v = e.create_dataset("value", shape=(n_frames, n_atoms, 3), dtype=np.float32,
                                 chunks=(min(chunk, n_frames), n_atoms, 3))
            v.attrs["unit"] = "nm" if name == "position" else "nm ps-1"
            e.create_dataset("step", data=np.arange(n_frames, dtype=np.int64) * 10)
            t = e.create_dataset("time", data=np.arange(n_frames, dtype=np.float64) * 0.01)
            t.attrs["unit"] = "ps"
            for i in range(0, n_frames, chunk):
                n = min(chunk, n_frames - i)
                noise = rng.standard_normal((n, n_atoms, 3), dtype=np.float32)
                v[i:i + n] = base + 0.05 * noise if name == "position" else 0.3 * noise
    tmp.rename(path)
    return path


def make_dcd(path: Path, n_atoms: int, n_frames: int, chunk: int = 100) -> tuple[Path, Path]:
    """A DCD and a PDB topology written by mdtraj (argon-like atoms)."""
    import mdtraj as md
    from mdtraj.formats import DCDTrajectoryFile

    top_path = path.with_suffix(".pdb")
    if path.exists() and top_path.exists():
        return path, top_path
    rng = _rng()
    top = md.Topology()
    chain = top.add_chain()
    for _ in range(n_atoms):
        res = top.add_residue("AR", chain)
        top.add_atom("AR", md.element.argon, res)
    base = rng.uniform(0, 10, size=(n_atoms, 3)).astype(np.float32)
    md.Trajectory(base[None], top).save_pdb(str(top_path))
    tmp = path.with_name(path.stem + ".part.dcd")
    with DCDTrajectoryFile(str(tmp), "w") as f:
        for i in range(0, n_frames, chunk):
            n = min(chunk, n_frames - i)
            xyz = base + 0.05 * rng.standard_normal((n, n_atoms, 3), dtype=np.float32)
            f.write(10.0 * xyz)  # DCD stores Angstrom
    tmp.rename(path)
    return path, top_path


def _open(paths, **kw):
    import contextlib
    import io

    from phasewake.core.readers import open_run

    with contextlib.redirect_stdout(io.StringIO()):
        return open_run(paths, **kw)


def _drain(work):
    from phasewake.core.progress import drive

    return drive(work)


def _h5_plain_read(path: Path, names=("position", "velocity"), chunk: int = 256) -> float:
    """Plain read baseline: every block of the named datasets into a reused buffer, with h5py."""
    import h5py

    total = 0.0
    with h5py.File(path, "r") as f:
        for name in names:
            ds = f[f"particles/all/{name}/value"]
            buf = np.empty((chunk,) + ds.shape[1:], np.float32)
            for i in range(0, ds.shape[0], chunk):
                n = min(chunk, ds.shape[0] - i)
                ds.read_direct(buf, np.s_[i:i + n], np.s_[0:n])
                total += float(buf[0, 0, 0])
    return total


@case
def open_run_time(full: bool, work: Path) -> Outcome:
    s = _sizes(full)
    big = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    small = make_h5md(work / "small.h5md", s["atoms"], max(10, s["frames"] // 20))
    t_small = best_of(lambda: _open([small]))
    t_big = best_of(lambda: _open([big]))
    return finish(Outcome(
        name="open_run_time", what="open an H5MD run (headers only)",
        baseline="open of the same system with 1/20 of the frames",
        measured_s=t_big, baseline_s=t_small, target="<= 1 s, and ~independent of frames (ratio <= 2)",
        target_ratio=2.0, absolute_target_s=1.0,
        sizes={"atoms": s["atoms"], "frames": s["frames"], "file_MB": big.stat().st_size / 1e6}))


@case
def coordinate_with_momentum(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.coordinates import compute_coordinates

    s = _sizes(full)
    path = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    run = _open([path])
    base = best_of(lambda: _h5_plain_read(path), repeat=2)
    meas = best_of(lambda: _drain(compute_coordinates(run, ["distance(0, 1)"])), repeat=2)
    return finish(Outcome(
        name="coordinate_with_momentum", what="distance(0, 1) with velocity, m_eff and momentum",
        baseline="plain h5py read of positions+velocities", measured_s=meas, baseline_s=base,
        target="<= 1.3x the plain read", target_ratio=1.3,
        sizes={"atoms": s["atoms"], "frames": s["frames"], "file_MB": path.stat().st_size / 1e6}))


@case
def coordinate_dcd(full: bool, work: Path) -> Outcome:
    import contextlib
    import io

    import mdtraj as md

    from phasewake.core.analyses.coordinates import compute_coordinates

    s = _sizes(full)
    frames = s["frames"] * 3 if full else s["frames"]
    dcd, pdb = make_dcd(work / "big.dcd", s["atoms"], frames)

    def plain():
        with contextlib.redirect_stdout(io.StringIO()):
            for chunk in md.iterload(str(dcd), top=str(pdb), chunk=256):
                chunk.xyz[0, 0, 0]

    run = _open([dcd], topology=pdb)
    base = best_of(plain, repeat=2)
    meas = best_of(lambda: _drain(compute_coordinates(run, ["distance(0, 1)"])), repeat=2)
    return finish(Outcome(
        name="coordinate_dcd", what="distance(0, 1) over a DCD (velocity by central differences)",
        baseline="mdtraj.iterload plain read of the same DCD", measured_s=meas, baseline_s=base,
        target="<= 1.3x the plain read", target_ratio=1.3,
        sizes={"atoms": s["atoms"], "frames": frames, "file_MB": dcd.stat().st_size / 1e6}))


def _pca_file(full: bool, work: Path) -> Path:
    s = _sizes(full)
    return make_h5md(work / "pca.h5md", s["pca_atoms"], s["pca_frames"], velocities=False, chunk=1000)


@case
def pca_exact(full: bool, work: Path) -> Outcome:
    import h5py

    from phasewake.core.analyses.projection import compute_pca

    s = _sizes(full)
    path = _pca_file(full, work)
    run = _open([path])

    def gemm():  # the bare covariance cost: float32 X^T X per chunk, accumulated in float64
        acc = np.zeros((3 * s["pca_atoms"],) * 2)
        with h5py.File(path, "r") as f:
            ds = f["particles/all/position/value"]
            for i in range(0, ds.shape[0], 1000):
                x = ds[i:i + 1000].reshape(-1, 3 * s["pca_atoms"])
                acc += x.T @ x
        return acc

    base = best_of(gemm, repeat=1)
    meas = best_of(lambda: _drain(compute_pca(run, atom_indices=np.arange(s["pca_atoms"]), fit=True,
                                              projections=False, method="exact")), repeat=1)
    return finish(Outcome(
        name="pca_exact", what=f"10-component PCA of {3 * s['pca_atoms']} coordinates, exact route",
        baseline="bare chunked float32 covariance GEMM over the same file", measured_s=meas, baseline_s=base,
        target="<= 1.2x the bare covariance cost", target_ratio=1.2,
        sizes={"coordinates": 3 * s["pca_atoms"], "frames": s["pca_frames"]}))


@case
def pca_fast(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.projection import compute_pca

    s = _sizes(full)
    path = _pca_file(full, work)
    run = _open([path])
    base = best_of(lambda: _h5_plain_read(path, names=("position",), chunk=1000), repeat=2)
    meas = best_of(lambda: _drain(compute_pca(run, atom_indices=np.arange(s["pca_atoms"]), fit=True,
                                              projections=False, method="randomized")), repeat=2)
    return finish(Outcome(
        name="pca_fast", what="10-component randomized PCA (Halko, Martinsson and Tropp 2011)",
        baseline="plain h5py read of the positions", measured_s=meas, baseline_s=base,
        target="<= 2x the plain read", target_ratio=2.0,
        sizes={"coordinates": 3 * s["pca_atoms"], "frames": s["pca_frames"]}))


@case
def audit_energy_table(full: bool, work: Path) -> Outcome:
    import h5py

    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.model.run import EnergyTable, RunMetadata, Series
    from phasewake.core.readers.memory import run_from_arrays

    s = _sizes(full)
    n = s["table_rows"]
    path = work / "table.h5"
    if not path.exists():
        rng = _rng()
        t = np.arange(n) * 1e-3
        ke = 500 + 10 * rng.standard_normal(n)
        pe = -800 + 1e-5 * t - (ke - 500) + 0.05 * rng.standard_normal(n)
        with h5py.File(path, "w") as f:
            f["time"], f["kinetic"], f["potential"] = t, ke, pe

    def read():
        with h5py.File(path, "r") as f:
            return f["time"][()], f["kinetic"][()], f["potential"][()]

    base = best_of(read)

    def audit():
        t, ke, pe = read()
        table = EnergyTable(time_ps=t, series={
            "kinetic": Series("kinetic", ke, "kJ/mol", "kinetic"),
            "potential": Series("potential", pe, "kJ/mol", "potential")})
        run = run_from_arrays(np.zeros((1, 100, 3)), np.zeros(1), np.ones(100), energies=table,
                              metadata=RunMetadata(ensemble="NVE", timestep_ps=0.001))
        run.frames = None
        run.time_ps = t[:0]
        return _drain(audit_run(run))

    meas = best_of(audit, repeat=3)  # same repeats as the baseline (min of more runs is lower)
    return finish(Outcome(
        name="audit_energy_table", what=f"energy audit of a {n:.0e}-row energy table",
        baseline="plain h5py read of the same columns", measured_s=meas, baseline_s=base,
        target="<= 1.5x the plain read", target_ratio=1.5, sizes={"rows": n},
        notes="includes drift fit, fluctuation ratio, events and the statistical inefficiency by FFT"))


def _big_run_and_velocity_read(full: bool, work: Path) -> tuple[dict[str, int], Any, float]:
    """The sizes, the run of the big H5MD file and the baseline of a velocity case: the best of 2 plain h5py
    reads of its velocities."""
    s = _sizes(full)
    path = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    return s, _open([path]), best_of(lambda: _h5_plain_read(path, names=("velocity",)), repeat=2)


@case
def audit_velocities(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.audit import audit_run

    s, run, base = _big_run_and_velocity_read(full, work)
    meas = best_of(lambda: _drain(audit_run(run, n_constraints=0)), repeat=2)  # as many runs as the baseline
    return finish(Outcome(
        name="audit_velocities", what="kinetic temperature, DOF and equipartition from stored velocities",
        baseline="plain h5py read of the velocities", measured_s=meas, baseline_s=base,
        target="<= 1.5x the plain read", target_ratio=1.5,
        sizes={"atoms": s["atoms"], "frames": s["frames"]},
        notes="audit_run also reads positions when it infers constraints from bond lengths"))


@case
def vacf_trajectory(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.velocity import vacf

    s, run, base = _big_run_and_velocity_read(full, work)
    meas = best_of(lambda: _drain(vacf(run, max_lag_ps=0.5)), repeat=2)  # as many runs as the baseline
    return finish(Outcome(
        name="vacf_trajectory", what="velocity autocorrelation, streamed (50-frame lag window)",
        baseline="plain h5py read of the velocities", measured_s=meas, baseline_s=base,
        target="<= 1.5x the plain read", target_ratio=1.5,
        sizes={"atoms": s["atoms"], "frames": s["frames"]}))


@case
def crossings_long_series(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.crossings import crossings_work

    s = _sizes(full)
    n = s["series"]
    rng = _rng()
    # A two-state signal: +-1 plateaus with switches every ~1e4 samples, plus noise that recrosses.
    switches = np.cumsum(rng.exponential(1e4, size=n // 5000 + 10)).astype(np.int64)
    state = np.zeros(n, np.float64)
    idx = switches[switches < n]
    state[idx] = 1.0
    q = np.cumsum(state, out=state)  # in place: the peak below is the analysis, not three input copies
    del state
    q %= 2
    q *= 2.0
    q -= 1.0
    q += 0.35 * rng.standard_normal(n)
    t = np.arange(n, dtype=np.float64) * 1e-3

    def one_pass():
        return np.flatnonzero(np.diff(q > 0))

    base = best_of(one_pass, repeat=2)
    meas = best_of(lambda: _drain(crossings_work([(t, q)], states=(-0.5, 0.5), surface=0.0,
                                                 kappa_time_series=False)), repeat=2)  # same repeats
    return finish(Outcome(
        name="crossings_long_series", what=f"states, crossings, paths, dwells and rates over {n:.0e} samples",
        baseline="one numpy pass (np.diff + np.flatnonzero)", measured_s=meas, baseline_s=base,
        target="<= 5x one numpy pass", target_ratio=5.0, sizes={"samples": n}))


@case
def acf_long_series(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.correlation import analyse_series

    s = _sizes(full)
    n = s["acf"]
    rng = _rng()
    from scipy.signal import lfilter

    x = lfilter([1.0], [1.0, -0.9], rng.standard_normal(n))
    base = best_of(lambda: float(np.sum((x - x.mean()) ** 2)))
    meas = best_of(lambda: analyse_series(x, dt_ps=0.001), repeat=2)
    return finish(Outcome(
        name="acf_long_series", what=f"ACF, g and ESS of a {n:.0e}-point series (FFT)",
        baseline="one numpy pass (centred sum of squares)", measured_s=meas, baseline_s=base,
        target="informational (FFT cost is n log n; PERFORMANCE.md: 1e7 in ~1.3 s)", sizes={"points": n}))


@case
def g_many_series(full: bool, work: Path) -> Outcome:
    from phasewake.core.analyses.correlation import statistical_inefficiency

    s = _sizes(full)
    rng = _rng()
    from scipy.signal import lfilter

    x = lfilter([1.0], [1.0, -0.5], rng.standard_normal((s["many_series"], s["many_len"])), axis=1)
    base = best_of(lambda: float(np.sum((x - x.mean(axis=1, keepdims=True)) ** 2)))
    meas = best_of(lambda: statistical_inefficiency(x, axis=1), repeat=2)
    return finish(Outcome(
        name="g_many_series", what=f"g of {s['many_series']} series of {s['many_len']} points (vectorised)",
        baseline="one numpy pass", measured_s=meas, baseline_s=base, target="informational",
        sizes={"series": s["many_series"], "points": s["many_len"]}))


@case
def window_first_panel_and_cursor(full: bool, work: Path) -> Outcome:
    import os

    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from phasewake.app.window import benchmark_hooks

    s = _sizes(full)
    path = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    first_s, cursor_s = benchmark_hooks.first_panel_and_cursor(path, n_points=s["plot_points"])
    return finish(Outcome(
        name="window_first_panel_and_cursor", what="window: open -> first drawn panel; cursor redraw",
        baseline="(absolute targets)", measured_s=first_s, baseline_s=None,
        target="first panel <= 2 s; cursor redraw <= 30 ms with 1e7 points", absolute_target_s=2.0,
        notes=f"cursor redraw {1000 * cursor_s:.1f} ms with {s['plot_points']:.0e} points",
        sizes={"atoms": s["atoms"], "frames": s["frames"], "plot_points": s["plot_points"],
               "cursor_redraw_ms": 1000 * cursor_s}))


@case
def one_pass_many(full: bool, work: Path) -> Outcome:
    """Coordinates + group temperatures + VACF from one read (core.onepass), against the sum of the three
    separate analyses and against the plain read of positions + velocities."""
    from phasewake.core.analyses.coordinates import CoordinatesConsumer, compute_coordinates
    from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
    from phasewake.core.analyses.velocity import VACFConsumer, vacf
    from phasewake.core.model.framepass import FramePass, run_pass

    s = _sizes(full)
    path = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    run = _open([path])
    groups = {"first half": np.arange(s["atoms"] // 2), "second half": np.arange(s["atoms"] // 2, s["atoms"])}
    specs = ["distance(0, 1)"]

    def one_pass():
        fp = FramePass(run).add("q", CoordinatesConsumer(run, specs))
        fp.add("T", GroupTemperatureConsumer(run, groups=groups, n_com=0, n_constraints=0))
        return _drain(fp.add("v", VACFConsumer(run, max_lag_ps=0.5)).work())

    def separate():
        _drain(compute_coordinates(run, specs))
        _drain(run_pass(run, {"T": GroupTemperatureConsumer(run, groups=groups, n_com=0, n_constraints=0)}))
        _drain(vacf(run, max_lag_ps=0.5))

    base = best_of(lambda: _h5_plain_read(path), repeat=2)
    sep = best_of(separate, repeat=2)
    meas = best_of(one_pass, repeat=2)
    return finish(Outcome(
        name="one_pass_many", what="one pass: distance(0, 1) with momentum + 2 group temperatures + VACF",
        baseline="plain h5py read of positions+velocities", measured_s=meas, baseline_s=base,
        target="<= 2x the plain read, and less than the sum of the separate passes", target_ratio=2.0,
        notes=f"sum of the separate analyses {sep:.3f} s: one pass is {meas / sep:.2f}x of it"
              + ("" if meas < sep else " (NOT below the sum)"),
        sizes={"atoms": s["atoms"], "frames": s["frames"], "separate_s": sep, "ratio_to_separate": meas / sep}))


def _peak_child(path: str, budget_mb: float, q) -> None:  # runs in a spawned process
    import resource

    import scipy.fft  # noqa: F401 - import costs are not the pass's memory
    import scipy.signal  # noqa: F401
    import scipy.stats  # noqa: F401

    import phasewake.core.analyses.coordinates  # noqa: F401
    import phasewake.core.analyses.temperature  # noqa: F401
    import phasewake.core.analyses.velocity  # noqa: F401
    from phasewake.core.analyses.coordinates import CoordinatesConsumer
    from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
    from phasewake.core.analyses.velocity import VACFConsumer
    from phasewake.core.model.framepass import FramePass
    from phasewake.core.readers import open_run
    from phasewake.core.settings import set_chunk_budget_mb

    set_chunk_budget_mb(budget_mb)
    run = open_run([path])
    with open("/proc/self/statm") as fh:
        rss0 = int(fh.read().split()[1]) * resource.getpagesize() / 1e6
    fp = FramePass(run).add("q", CoordinatesConsumer(run, ["distance(0, 1)"]))
    fp.add("T", GroupTemperatureConsumer(run, n_com=0, n_constraints=0))
    _drain(fp.add("v", VACFConsumer(run, max_lag_ps=0.05)).work())
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0 * 1.048576  # KiB -> MB
    q.put(peak - rss0)


def _extra_peak_mb(path: Path, budget_mb: float) -> float:
    import multiprocessing as mp

    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_peak_child, args=(str(path), budget_mb, q))
    p.start()
    out = q.get()
    p.join()
    return float(out)


@case
def memory_bounded_by_chunk(full: bool, work: Path) -> Outcome:
    """Peak memory of one pass (coordinate + temperatures + VACF) is set by the chunk budget, not the file:
    the same pass over a file 4x longer, and with a 4x larger budget, each in a fresh process."""
    n_atoms = 20_000 if full else 300
    frames = 500 if full else 200
    budget = 32.0 if full else 0.5
    short = make_h5md(work / "mem_short.h5md", n_atoms, frames)
    long = make_h5md(work / "mem_long.h5md", n_atoms, 4 * frames)
    per_frame_mb = n_atoms * 3 * 4 * 2 / 1e6  # positions + velocities, float32
    p_short = _extra_peak_mb(short, budget)
    p_long = _extra_peak_mb(long, budget)
    p_big = _extra_peak_mb(long, 4 * budget)
    o = Outcome(
        name="memory_bounded_by_chunk",
        what=f"peak memory of one pass: file 4x longer; budget {budget:g} -> {4 * budget:g} MB",
        baseline=f"the same pass over the {frames}-frame file (extra peak {p_short:.0f} MB)",
        target="extra peak for the 4x longer file <= 1.25x that of the short file", target_ratio=1.25,
        ratio=p_long / max(p_short, 1e-9),
        notes=(f"extra peak RSS above the opened run: {p_short:.1f} MB ({frames} frames), {p_long:.1f} MB "
               f"({4 * frames} frames, file {4 * frames * per_frame_mb:.0f} MB), {p_big:.1f} MB with a "
               f"{4 * budget:g} MB budget; a chunk is min(256 frames, budget) = "
               f"{min(256, int(budget / per_frame_mb))} frames at {budget:g} MB"),
        sizes={"atoms": n_atoms, "frames_short": frames, "frames_long": 4 * frames, "budget_mb": budget,
               "extra_peak_short_mb": p_short, "extra_peak_long_mb": p_long, "extra_peak_big_budget_mb": p_big})
    o.met = o.ratio is not None and o.ratio <= 1.25
    return o


@case
def cache_repeat_audit(full: bool, work: Path) -> Outcome:
    """Looking at the same run again: open + audit through the result cache, against the first audit
    (compute and store) of the same file in the same process."""
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import cached_audit

    s = _sizes(full)
    path = make_h5md(work / "big.h5md", s["atoms"], s["frames"])
    folder = work / "cache_repeat"
    firsts = []
    for k in range(2):  # best of two first audits, each into an empty cache
        cache = ResultCache(folder / str(k), enabled=True)
        firsts.append(best_of(lambda c=cache: _drain(cached_audit(_open([path]), n_constraints=0, cache=c)),
                              repeat=1))
    cache = ResultCache(folder / "0", enabled=True)
    again = best_of(lambda: _drain(cached_audit(_open([path]), n_constraints=0, cache=cache)), repeat=2)
    return finish(Outcome(
        name="cache_repeat_audit", what="open + audit of a run already audited (result cache hit)",
        baseline="the first open + audit of the same file (computed and stored)", measured_s=again,
        baseline_s=min(firsts), target="<= 0.05x the first audit (full size)",
        target_ratio=0.05 if full else None, sizes={"atoms": s["atoms"], "frames": s["frames"]},
        notes="quick sizes: opening the file and the fixed cost of a hit dominate"))


# ---- engine energy files (GROMACS .edr, LAMMPS log.lammps) ---------------------------------------------

_EDR_TERMS = ("LJ (SR)", "Coulomb (SR)", "Coul. recip.", "Potential", "Kinetic En.", "Total Energy",
              "Conserved En.", "Temperature", "Pressure (bar)", "Pres. DC (bar)", "Constr. rmsd", "T-System")


def make_edr(path: Path, n_frames: int, *, nsum_from: int = 1) -> Path:
    """A single-precision .edr laid out as GROMACS 2022 writes it: frame 0 without
    accumulators, the rest with two per term (nsum > 0), written with numpy structured big-endian records."""
    if path.exists():
        return path
    names = [t.split(" (bar)")[0] for t in _EDR_TERMS]
    units = ["bar" if "(bar)" in t else ("K" if t.startswith(("Temp", "T-")) else ("" if "rmsd" in t else "kJ/mol"))
             for t in _EDR_TERMS]
    nre = len(names)
    head = bytearray(np.array([-55555, 5, nre], ">i4").tobytes())
    for s in [x for pair in zip(names, units) for x in pair]:
        b = s.encode()
        head += np.array([len(b)], ">i4").tobytes() + b + b"\0" * ((4 - len(b) % 4) % 4)

    def frames(n: int, start: int, per_term: int) -> bytes:
        dt = np.dtype([("magic", ">f4"), ("id", ">i4"), ("ver", ">i4"), ("t", ">f8"), ("step", ">i8"),
                       ("nsum", ">i4"), ("nsteps", ">i8"), ("dt", ">f8"), ("nre", ">i4"), ("ndisre", ">i4"),
                       ("nblock", ">i4"), ("esize", ">i4"), ("z1", ">i4"), ("z2", ">i4"),
                       ("e", ">f4", (nre, per_term))])
        rec = np.zeros(n, dt)
        k = np.arange(start, start + n)
        rec["magic"], rec["id"], rec["ver"] = -2e10, -7777777, 5
        rec["t"], rec["step"], rec["dt"] = k * 0.02, k * 10, 0.002
        rec["nsum"], rec["nsteps"] = (10 if per_term == 3 else 0), 10
        rec["nre"], rec["esize"] = nre, 16 * nre
        rec["e"][:, :, 0] = np.sin(k[:, None] * 0.01 + np.arange(nre)) * 1e3
        return rec.tobytes()

    tmp = path.with_suffix(".part")
    with open(tmp, "wb") as f:
        f.write(bytes(head))
        f.write(frames(nsum_from, 0, 1))
        step = 200_000
        for i in range(nsum_from, n_frames, step):
            f.write(frames(min(step, n_frames - i), i, 3))
    tmp.rename(path)
    return path


def make_lammps_log(path: Path, n_rows: int) -> Path:
    """A log.lammps of one NVE run in real units with n_rows thermo rows, in the 2021 layout,
    with a SHAKE-free block as LAMMPS prints it ('%10d' step, '%-14.8g'-style values)."""
    if path.exists():
        return path
    rng = _rng()
    tmp = path.with_suffix(".part")
    with open(tmp, "w") as f:
        f.write("LAMMPS (29 Sep 2021 - Update 2)\nunits real\natom_style atomic\ntimestep 2.0\n"
                "fix 1 all nve\nthermo_style custom step temp pe ke etotal press\nthermo 10\n"
                f"run {10 * (n_rows - 1)}\nStep Temp PotEng KinEng TotEng Press \n")
        block = 200_000
        for i in range(0, n_rows, block):
            n = min(block, n_rows - i)
            step = np.arange(i, i + n) * 10
            temp = 300 + 5 * rng.standard_normal(n)
            pe = -2500 + 3 * rng.standard_normal(n)
            ke = 0.5 * 765 * 0.0019872067 * temp
            cols = np.column_stack([step, temp, pe, ke, pe + ke, 100 * rng.standard_normal(n)])
            np.savetxt(f, cols, fmt=["%10d", "%12.8g", "%12.8g", "%12.8g", "%12.8g", "%12.8g"], delimiter=" ")
        f.write(f"Loop time of 123.4 on 1 procs for {10 * (n_rows - 1)} steps with 256 atoms\n")
    tmp.rename(path)
    return path


def _bytes_read(path: Path) -> float:
    return float(np.fromfile(path, dtype=np.uint8)[-1])


@case
def engine_energy_edr(full: bool, work: Path) -> Outcome:
    """GROMACS .edr of 1e6 frames through our reader, against a plain numpy read of its bytes."""
    from phasewake.core.readers import gromacs

    n = 1_000_000 if full else 50_000
    path = make_edr(work / f"bench{n}.edr", n)
    base = best_of(lambda: _bytes_read(path))
    meas = best_of(lambda: gromacs.read_edr(path))
    return finish(Outcome(
        name="engine_energy_edr", what=f"GROMACS .edr of {n:.0e} frames ({len(_EDR_TERMS)} terms, accumulators "
        "skipped) read into an energy table", baseline="np.fromfile of the same bytes", measured_s=meas,
        baseline_s=base, target="<= 3x the plain read", target_ratio=3.0,
        sizes={"frames": n, "MB": round(path.stat().st_size / 1e6, 1)}))


@case
def engine_energy_lammps_log(full: bool, work: Path) -> Outcome:
    """log.lammps with 1e6 thermo rows through our reader, against a plain numpy read of its bytes; the parse
    of the same numbers by np.loadtxt is measured beside it (notes)."""
    from phasewake.core.readers import lammps_log

    n = 1_000_000 if full else 50_000
    path = make_lammps_log(work / f"bench{n}.lammps", n)
    base = best_of(lambda: _bytes_read(path))
    meas = best_of(lambda: lammps_log.read_log(path))
    loadtxt = best_of(lambda: np.loadtxt(path, skiprows=9, max_rows=n), repeat=1)
    o = finish(Outcome(
        name="engine_energy_lammps_log", what=f"log.lammps with {n:.0e} thermo rows (6 columns) read into an "
        "energy table", baseline="np.fromfile of the same bytes", measured_s=meas, baseline_s=base,
        target="<= 3x the plain read", target_ratio=3.0,
        sizes={"rows": n, "MB": round(path.stat().st_size / 1e6, 1), "np_loadtxt_s": round(loadtxt, 4),
               "ratio_to_np_loadtxt": round(meas / loadtxt, 3)}))
    return o


def make_lammps_dump(path: Path, n_atoms: int, n_frames: int) -> Path:
    """A LAMMPS `dump custom` text file (id type x y z vx vy vz, rows in random order, %g like LAMMPS)."""
    if path.exists():
        return path
    rng = _rng()
    tmp = path.with_suffix(".part")
    with open(tmp, "w") as f:
        for k in range(n_frames):
            f.write(f"ITEM: TIMESTEP\n{100 * k}\nITEM: NUMBER OF ATOMS\n{n_atoms}\nITEM: BOX BOUNDS pp pp pp\n"
                    "0 50\n0 50\n0 50\nITEM: ATOMS id type x y z vx vy vz\n")
            rows = np.column_stack([rng.permutation(n_atoms) + 1, np.ones(n_atoms), 50 * rng.random((n_atoms, 3)),
                                    0.01 * rng.standard_normal((n_atoms, 3))])
            np.savetxt(f, rows, fmt=["%d", "%d", "%g", "%g", "%g", "%g", "%g", "%g"])
    tmp.rename(path)
    return path


@case
def lammps_dump_open_and_read(full: bool, work: Path) -> Outcome:
    """A LAMMPS dump opened (one scan for the frame index) against a plain read of its bytes; reading
    every frame (parse, sort by id, units) is measured beside it (notes)."""
    from phasewake.core.readers import open_run

    n_atoms, n_frames = (20_000, 200) if full else (2_000, 20)
    path = make_lammps_dump(work / f"bench{n_atoms}x{n_frames}.lammpstrj", n_atoms, n_frames)
    base = best_of(lambda: _bytes_read(path))
    meas = best_of(lambda: open_run([path], units_style="real", timestep_ps=0.001))
    run = open_run([path], units_style="real", timestep_ps=0.001)
    read = best_of(lambda: sum(c.n_frames for c in run.frames.iter_chunks()), repeat=1)
    return finish(Outcome(
        name="lammps_dump_open_and_read", what=f"open a LAMMPS dump of {n_atoms} atoms x {n_frames} frames "
        "(frame index scan, first frame read)", baseline="np.fromfile of the same bytes", measured_s=meas,
        baseline_s=base, target="<= 3x the plain read", target_ratio=3.0,
        sizes={"atoms": n_atoms, "frames": n_frames, "MB": round(path.stat().st_size / 1e6, 1),
               "read_all_frames_s": round(read, 3), "read_all_ratio": round(read / base, 2)}))


def make_energy_csv(path: Path, n_rows: int) -> Path:
    """A CSV energy table with six columns (time, potential, kinetic, total, temperature, pressure)."""
    if path.exists():
        return path
    rng = _rng()
    tmp = path.with_suffix(".part")
    with open(tmp, "w") as f:
        f.write("time (ps),potential (kJ/mol),kinetic (kJ/mol),total (kJ/mol),temperature (K),pressure (bar)\n")
        for i in range(0, n_rows, 100_000):
            m = min(100_000, n_rows - i)
            cols = [np.arange(i, i + m) * 0.002, rng.normal(-5e4, 50, m), rng.normal(2e4, 30, m),
                    rng.normal(-3e4, 5, m), rng.normal(300, 3, m), rng.normal(1, 100, m)]
            np.savetxt(f, np.column_stack(cols), delimiter=",", fmt="%.10g")
    tmp.rename(path)
    return path


def _table_peak_child(path: str, kind: str, q) -> None:  # runs in a spawned process
    import resource

    from phasewake.core.readers.tables import read_table

    with open("/proc/self/statm") as fh:
        rss0 = int(fh.read().split()[1]) * resource.getpagesize() / 1e6
    if kind == "table":
        table, _ = read_table(path)
        n = len(table)
    else:
        n = np.load(path).shape[0]
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0 * 1.048576  # KiB -> MB
    q.put((peak - rss0, n))


def _table_extra_peak_mb(path: Path, kind: str) -> tuple[float, int]:
    import multiprocessing as mp

    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_table_peak_child, args=(str(path), kind, q))
    p.start()
    out = q.get()
    p.join()
    return float(out[0]), int(out[1])


@case
def energy_table_memory(full: bool, work: Path) -> Outcome:
    """Peak memory of reading a CSV energy table, against loading the same numbers (float64) from a .npy
    file: the table is streamed into one array, never held whole as text or as a str per cell."""
    n = 10_000_000 if full else 200_000
    path = make_energy_csv(work / f"energy{n}.csv", n)
    npy = work / f"energy{n}.npy"
    if not npy.exists():
        np.save(npy, np.zeros((n, 6)))
    p_table, rows = _table_extra_peak_mb(path, "table")
    p_npy, _ = _table_extra_peak_mb(npy, "npy")
    o = Outcome(
        name="energy_table_memory", what=f"extra peak memory of reading a {n:.0e}-row, 6-column CSV energy table "
        f"({path.stat().st_size / 1e6:.0f} MB)", baseline=f"np.load of the same numbers from .npy ({p_npy:.0f} MB)",
        target="<= 1.5x the .npy load (the text read whole took ~14x the file's size before)", target_ratio=1.5,
        ratio=p_table / max(p_npy, 1e-9),
        notes=f"extra peak {p_table:.0f} MB for the CSV ({rows} rows), {p_npy:.0f} MB for the .npy",
        sizes={"rows": n, "csv_MB": round(path.stat().st_size / 1e6, 1), "extra_peak_table_mb": p_table,
               "extra_peak_npy_mb": p_npy})
    o.met = o.ratio is not None and o.ratio <= 1.5
    return o
