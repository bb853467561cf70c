"""Benchmark cases of the parallel routes: phasewake against the script a user would write.

The scripts use mdtraj, numpy and scikit-learn only, as a practitioner would (``script_*`` below; each is
the whole job: topology, frames, result). Both sides run in the same process, best of the same number
of runs, and both parse the topology each time (phasewake's in-process topology cache is emptied before
each of its runs, so it gains nothing from having parsed the file before).

Worker processes start afresh in every phasewake run (a pool lives for one pass), so their start-up is
in the measured time, as it is for a command.
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import numpy as np

from tests.benchmarks.harness import Outcome, best_of, case, finish


def _sizes(full: bool) -> dict[str, int]:
    if full:
        return {"atoms": 20_000, "frames": 2_000, "pca_atoms": 1_000, "replicas": 64, "rep_atoms": 2_000,
                "rep_frames": 400, "index_atoms": 100, "index_frames": 100_000}
    return {"atoms": 2_000, "frames": 200, "pca_atoms": 200, "replicas": 8, "rep_atoms": 200, "rep_frames": 100,
            "index_atoms": 20, "index_frames": 5_000}


def _topology(n_atoms: int):
    import mdtraj as md

    top = md.Topology()
    chain = top.add_chain()
    for _ in range(n_atoms):
        top.add_atom("AR", md.element.argon, top.add_residue("AR", chain))
    return top


def make_xdr(folder: Path, n_atoms: int, n_frames: int, *, name: str = "big", trr: bool = True,
             double_well: bool = False, seed: int = 20261203) -> tuple[Path, Path | None, Path]:
    """An XTC (and a TRR) of argon-like atoms jiggling about random sites, with a PDB; 1 ps between frames.

    ``double_well``: atom 1 hops between 0.4 and 0.6 nm from atom 0 (a two-state distance for crossings).
    """
    import mdtraj as md
    from mdtraj.formats import TRRTrajectoryFile, XTCTrajectoryFile

    xtc, pdb = folder / f"{name}.xtc", folder / f"{name}.pdb"
    trr_path = folder / f"{name}.trr" if trr else None
    if xtc.exists() and pdb.exists() and (trr_path is None or trr_path.exists()):
        return xtc, trr_path, pdb
    rng = np.random.default_rng(seed)
    base = rng.uniform(0.0, 10.0, (n_atoms, 3)).astype(np.float32)
    base[1] = base[0] + np.array([0.4, 0.0, 0.0], np.float32)
    md.Trajectory(base[None], _topology(n_atoms)).save_pdb(str(pdb))
    box = np.repeat(10.0 * np.eye(3, dtype=np.float32)[None], 100, axis=0)
    state, span = 0, 0
    with contextlib.ExitStack() as stack:
        fx = stack.enter_context(XTCTrajectoryFile(str(xtc) + ".part", "w"))
        ft = stack.enter_context(TRRTrajectoryFile(str(trr_path) + ".part", "w")) if trr_path else None
        for i in range(0, n_frames, 100):
            n = min(100, n_frames - i)
            xyz = base + 0.02 * rng.standard_normal((n, n_atoms, 3), dtype=np.float32)
            if double_well:
                for k in range(n):
                    span += 1
                    if span > 5 and rng.random() < 0.05:
                        state, span = 1 - state, 0
                    xyz[k, 1] = xyz[k, 0] + np.array([0.4 + 0.2 * state, 0.0, 0.0]) + 0.01 * rng.standard_normal(3)
            t = np.arange(i, i + n, dtype=np.float32)
            fx.write(xyz, time=t, step=np.arange(i, i + n) * 500, box=box[:n])
            if ft is not None:
                ft.write(xyz, time=t, step=np.arange(i, i + n) * 500, box=box[:n])
    Path(str(xtc) + ".part").rename(xtc)
    if trr_path:
        Path(str(trr_path) + ".part").rename(trr_path)
    return xtc, trr_path, pdb


def _warm(*paths: Path | None) -> None:
    """Read the files once, so both sides start from the page cache (on this shared machine other jobs
    evict it: a cold 200 MB XTC read 10.7 s, warm 0.3 s)."""
    for path in paths:
        if path is not None:
            with open(path, "rb") as fh:
                while fh.read(1 << 24):
                    pass


def _fresh_topologies() -> None:
    from phasewake.core.readers import trajectory

    trajectory.forget_topologies()


def _workers(n: int | None, *, fresh: bool = True) -> None:
    """Set the workers as ``--workers n`` does, from a process without a worker server yet: every timed
    repetition then pays the server's start as a command does (overlapping the open, parallel.warm_up),
    not only the first (the server would otherwise outlive the repetition; ``_stop`` is what
    multiprocessing's own tests call)."""
    from multiprocessing import forkserver

    from phasewake.core.model import parallel

    stop = getattr(forkserver._forkserver, "_stop", None)
    if fresh and stop is not None:
        stop()
    parallel.set_workers(n)


# --------------------------------------------------------------------------------------------- scripts


def script_distance(traj: Path, pdb: Path) -> np.ndarray:
    """What a user writes for a distance over a trajectory: mdtraj.iterload + compute_distances."""
    import mdtraj as md

    top = md.load_topology(str(pdb))
    out = [md.compute_distances(chunk, [[0, 1]], periodic=True)[:, 0]
           for chunk in md.iterload(str(traj), top=top, chunk=256)]
    return np.concatenate(out)


def script_pca(traj: Path, pdb: Path, n_atoms: int) -> np.ndarray:
    """What a user writes for a PCA: mdtraj.load (the atoms of interest), superpose, scikit-learn PCA."""
    import mdtraj as md
    from sklearn.decomposition import PCA

    t = md.load(str(traj), top=str(pdb), atom_indices=np.arange(n_atoms))
    t.superpose(t, 0)
    return PCA(n_components=10).fit(t.xyz.reshape(t.n_frames, -1)).explained_variance_


# ---------------------------------------------------------------------------------------------- cases


def _phasewake_distance(traj: Path, pdb: Path, workers: int) -> np.ndarray:
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    _fresh_topologies()
    _workers(workers)
    with contextlib.redirect_stdout(io.StringIO()):
        run = open_run([traj], topology=pdb)
    return drive(compute_coordinates(run, ["distance(0, 1)"]))[0].values


def _coordinate_case(full: bool, work: Path, kind: str) -> Outcome:
    s = _sizes(full)
    xtc, trr, pdb = make_xdr(work, s["atoms"], s["frames"])
    path = xtc if kind == "xtc" else trr
    assert path is not None
    ref = script_distance(path, pdb)
    got = _phasewake_distance(path, pdb, 2)
    np.testing.assert_allclose(got, ref, rtol=2e-6, atol=1e-6)  # the two sides compute the same numbers
    _warm(path, pdb)
    base = best_of(lambda: script_distance(path, pdb), repeat=2)
    _warm(path, pdb)
    one = best_of(lambda: _phasewake_distance(path, pdb, 1), repeat=2)
    _warm(path, pdb)
    meas = best_of(lambda: _phasewake_distance(path, pdb, 2), repeat=2)
    _workers(None)
    return finish(Outcome(
        name=f"{kind}_coordinate_workers", what=f"distance(0, 1) over a {kind.upper()}, 2 workers",
        baseline="the user's script: mdtraj.iterload + compute_distances", measured_s=meas, baseline_s=base,
        target="<= 0.6x the script", target_ratio=0.6,
        sizes={"atoms": s["atoms"], "frames": s["frames"], "file_MB": path.stat().st_size / 1e6, "workers": 2},
        notes=f"1 worker: {one:.3f} s ({one / base:.2f}x the script)"))


@case
def xtc_coordinate_workers(full: bool, work: Path) -> Outcome:
    return _coordinate_case(full, work, "xtc")


@case
def trr_coordinate_workers(full: bool, work: Path) -> Outcome:
    return _coordinate_case(full, work, "trr")


def _phasewake_pca(xtc: Path, pdb: Path, n_atoms: int, workers: int) -> np.ndarray:
    from phasewake.core.analyses.projection import PCAConsumer
    from phasewake.core.model.framepass import run_pass
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    _fresh_topologies()
    _workers(workers)
    with contextlib.redirect_stdout(io.StringIO()):
        run = open_run([xtc], topology=pdb)
    consumer = PCAConsumer(run, atom_indices=np.arange(n_atoms), n_components=10, fit=True, method="exact",
                           mass_weighted=False)  # the script's PCA is of plain Cartesian coordinates
    return np.asarray(drive(run_pass(run, {"pca": consumer}, workers=workers))["pca"].eigenvalues)


@case
def pca_xtc_workers(full: bool, work: Path) -> Outcome:
    s = _sizes(full)
    xtc, _, pdb = make_xdr(work, s["atoms"], s["frames"])
    ref = script_pca(xtc, pdb, s["pca_atoms"])
    got = _phasewake_pca(xtc, pdb, s["pca_atoms"], 2)[:10]
    # the same leading variances (nm^2) to 6%: the synthetic atoms jiggle isotropically, so the spectrum is
    # nearly flat (the top 3 within 2% of each other) and the two superpositions (ours: float32 block fit,
    # mdtraj's: its own) move them by ~4% (measured 0.00198 against 0.00191 nm^2)
    np.testing.assert_allclose(np.sort(got)[::-1][:3], ref[:3], rtol=0.06)
    _warm(xtc, pdb)
    base = best_of(lambda: script_pca(xtc, pdb, s["pca_atoms"]), repeat=2)
    _warm(xtc, pdb)
    one = best_of(lambda: _phasewake_pca(xtc, pdb, s["pca_atoms"], 1), repeat=2)
    _warm(xtc, pdb)
    meas = best_of(lambda: _phasewake_pca(xtc, pdb, s["pca_atoms"], 2), repeat=2)
    _workers(None)
    return finish(Outcome(
        name="pca_xtc_workers", what=f"10-component PCA of {s['pca_atoms']} atoms from an XTC, 2 workers",
        baseline="the user's script: mdtraj.load + superpose + scikit-learn PCA", measured_s=meas,
        baseline_s=base, target="<= 0.6x the script", target_ratio=0.6,
        sizes={"atoms": s["atoms"], "pca_atoms": s["pca_atoms"], "frames": s["frames"], "workers": 2},
        notes=f"1 worker: {one:.3f} s ({one / base:.2f}x the script)"))


def _ensemble(full: bool, work: Path) -> list[tuple[Path, Path]]:
    s = _sizes(full)
    folder = work / "replicas"
    folder.mkdir(exist_ok=True)
    out = []
    for k in range(s["replicas"]):
        xtc, _, pdb = make_xdr(folder, s["rep_atoms"], s["rep_frames"], name=f"rep{k:03d}", trr=False,
                               double_well=True, seed=1000 + k)
        out.append((xtc, pdb))
    return out


def _crossings(files: list[tuple[Path, Path]], workers: int):
    from phasewake.core.analyses.crossings import CrossingsRequest
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    _fresh_topologies()
    # the ensemble case compares 2 workers with 1 for the same request: a running server for both (in quick
    # mode the whole 1-worker request takes ~25 ms, less than starting the server)
    _workers(workers, fresh=False)
    top = files[0][1]  # one topology for the ensemble, as `phasewake crossings --replicas --top FILE` takes it
    with contextlib.redirect_stdout(io.StringIO()):
        runs = [open_run([x], topology=top) for x, _ in files]
    request = CrossingsRequest(coordinate="distance(0, 1)", states=(0.45, 0.55), surface=0.5, temperature_K=300.0,
                               replicas=tuple(runs[1:]))
    return drive(request.work(runs[0]))


@case
def replicas_crossings_workers(full: bool, work: Path) -> Outcome:
    s = _sizes(full)
    files = _ensemble(full, work)
    _warm(*(p for pair in files for p in pair))
    one_res, two_res = _crossings(files, 1), _crossings(files, 2)
    assert one_res.n_transitions == two_res.n_transitions > 0
    base = best_of(lambda: _crossings(files, 1), repeat=2)
    meas = best_of(lambda: _crossings(files, 2), repeat=2)
    _workers(None)
    return finish(Outcome(
        name="replicas_crossings_workers", what=f"crossings of a {s['replicas']}-replica XTC ensemble, 2 workers",
        baseline="the same request with 1 worker", measured_s=meas, baseline_s=base,
        target="<= 0.6x 1 worker", target_ratio=0.6,
        sizes={"replicas": s["replicas"], "atoms": s["rep_atoms"], "frames": s["rep_frames"], "workers": 2}))


@case
def local_cluster_vs_pool(full: bool, work: Path) -> Outcome:
    from distributed import LocalCluster

    from phasewake.core.analyses.coordinates import CoordinatesConsumer
    from phasewake.core.model import cluster, parallel
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run

    s = _sizes(full)
    xtc, _, pdb = make_xdr(work, s["atoms"], s["frames"])
    with contextlib.redirect_stdout(io.StringIO()):
        run = open_run([xtc], topology=pdb)

    def ranges():
        consumers = {"q": CoordinatesConsumer(run, ["distance(0, 1)"])}
        return drive(parallel.ranges_pass(run, consumers, workers=2))["q"]

    _warm(xtc)
    base = best_of(ranges, repeat=2)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as lc:
        cluster.set_scheduler(lc.scheduler_address)  # a running scheduler: its start is not the pass's
        try:
            ranges()  # the workers' first import of phasewake is not the pass's either
            _warm(xtc)
            meas = best_of(ranges, repeat=2)
        finally:
            cluster.set_scheduler(None)
    return finish(Outcome(
        name="local_cluster_vs_pool", what="distance(0, 1) over an XTC in frame ranges on a LocalCluster of 2",
        baseline="the same ranges in a process pool of 2", measured_s=meas, baseline_s=base,
        target="<= 1.15x the process pool", target_ratio=1.15,
        sizes={"atoms": s["atoms"], "frames": s["frames"], "workers": 2}))


@case
def xtc_index_cached_open(full: bool, work: Path) -> Outcome:
    import os
    import shutil

    from phasewake.core.readers import open_run, xdr

    s = _sizes(full)
    xtc, _, pdb = make_xdr(work, s["index_atoms"], s["index_frames"], name="long", trr=False)
    cache = work / "index-cache"

    def first_open():
        shutil.rmtree(cache, ignore_errors=True)
        os.environ["PHASEWAKE_CACHE_DIR"] = str(cache)
        with contextlib.redirect_stdout(io.StringIO()):
            return open_run([xtc], topology=pdb)  # topology kept in this process: only the index differs

    def second_open():
        with contextlib.redirect_stdout(io.StringIO()):
            return open_run([xtc], topology=pdb)

    saved = os.environ.get("PHASEWAKE_CACHE_DIR")
    try:
        first_open()
        base = best_of(first_open, repeat=3)
        assert xdr.frame_index(xtc, ".xtc").from_cache
        meas = best_of(second_open, repeat=3)
    finally:
        if saved is not None:
            os.environ["PHASEWAKE_CACHE_DIR"] = saved
    return finish(Outcome(
        name="xtc_index_cached_open", what="open of an XTC whose frame index is kept",
        baseline="the first open (walks every frame header)", measured_s=meas, baseline_s=base,
        target="<= 0.05x the first open", target_ratio=0.05,
        sizes={"atoms": s["index_atoms"], "frames": s["index_frames"], "file_MB": xtc.stat().st_size / 1e6}))
