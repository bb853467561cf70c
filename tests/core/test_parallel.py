"""Frame ranges in worker processes (core/model/parallel.py): equal to the serial pass, errors, cancel.

Reference for every equality: the serial pass (``framepass.run_pass``) over the same frames, which the
frame-pass tests hold to the readers and to outside libraries. Counts and frame order must be exact;
sums of float64 over different groupings of the same float32 values differ only by rounding (relative
1e-12 is ample: ~2000 terms of size ~1 give errors ~1e-13).
"""

from __future__ import annotations

import shutil
import struct
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.errors import Cancelled, CorruptFileError, PhasewakeError
from phasewake.core.model import parallel
from phasewake.core.model.framepass import run_pass
from phasewake.core.progress import CancelToken, drive
from phasewake.core.readers import open_run
from phasewake.core.settings import chunking
from tests.parallel_consumers import FrameSums, NoMerge

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def make_xtc(folder: Path, n_atoms: int = 30, n_frames: int = 61, *, name: str = "t") -> tuple[Path, Path]:
    """An XTC (and its PDB) written by mdtraj's XTC writer: argon-like atoms jiggling about a lattice."""
    import mdtraj as md
    from mdtraj.formats import XTCTrajectoryFile

    top = md.Topology()
    chain = top.add_chain()
    for _ in range(n_atoms):
        top.add_atom("AR", md.element.argon, top.add_residue("AR", chain))
    rng = np.random.default_rng(7)
    base = rng.uniform(0.0, 3.0, (n_atoms, 3)).astype(np.float32)
    pdb, xtc = folder / f"{name}.pdb", folder / f"{name}.xtc"
    md.Trajectory(base[None], top).save_pdb(str(pdb))
    with XTCTrajectoryFile(str(xtc), "w") as f:
        for i in range(n_frames):
            xyz = (base + 0.02 * rng.standard_normal((n_atoms, 3))).astype(np.float32)
            f.write(xyz[None], time=[0.5 * i], step=[10 * i], box=3.0 * np.eye(3, dtype=np.float32)[None])
    return xtc, pdb


def _serial(run, start=0, stop=None, frames=None, **kw):
    """The serial pass, in chunks of at most ``frames`` frames (None: the default chunk setting)."""
    with chunking(frames=frames):
        return drive(run_pass(run, {"s": FrameSums(**kw)}, start=start, stop=stop))["s"]


def _same(a, b):
    assert a["count"] == b["count"]
    assert a["range"] == b["range"]
    np.testing.assert_array_equal(a["time"], b["time"])  # every frame once, in frame order
    np.testing.assert_allclose(a["sum"], b["sum"], rtol=1e-12, atol=0)
    np.testing.assert_allclose(a["sumsq"], b["sumsq"], rtol=1e-12, atol=0)


# ----------------------------------------------------------------------------------------- the ranges


def test_ranges_cover_the_frames_once_in_order_and_aligned():
    for start, stop, parts, align in [(0, 100, 4, 1), (3, 100, 4, 8), (5, 6, 4, 256), (0, 1000, 2, 256),
                                      (10, 17, 16, 1), (0, 9, 3, 4)]:
        got = parallel.cut_ranges(start, stop, parts, align=align)
        assert got[0][0] == start and got[-1][1] == stop
        assert all(a < b for a, b in got)
        assert all(got[k][1] == got[k + 1][0] for k in range(len(got) - 1))
        assert len(got) <= parts
        assert all((a - start) % align == 0 for a, _ in got)
    assert parallel.cut_ranges(5, 6, 4) == [(5, 6)]  # one frame: one range
    assert parallel.cut_ranges(0, 4, 8) == [(0, 1), (1, 2), (2, 3), (3, 4)]  # no empty range


def test_awkward_splits_merge_to_the_serial_pass(tmp_path):
    # ranges of one frame, one cut inside a chunk, uneven tails; read in this process, merged in order
    xtc, pdb = make_xtc(tmp_path)
    run = open_run([xtc], topology=pdb)
    serial = _serial(run, frames=8)
    for edges in ([0, 1, 2, 61], [0, 30, 31, 61], [0, 13, 60, 61], [0, 61]):
        parts = []
        for a, b in zip(edges[:-1], edges[1:]):
            parts.append(parallel.read_range(run, {"s": FrameSums()}, a, b, (8, 128.0), lambda n: None))
        merged = parallel.merge_in_order(parts)["s"].finish()
        _same(merged, serial)


def test_parallel_pass_equals_the_serial_pass_on_a_sample_run_and_an_xtc(tmp_path):
    run = open_run([SAMPLES / "dimer_nve.dcd"], topology=SAMPLES / "dimer_nve.pdb")
    records = []
    with chunking(frames=64):
        got = drive(parallel.ranges_pass(run, {"s": FrameSums()}, workers=2), records.append)
    _same(got["s"], _serial(run, frames=64))
    assert records and records[-1].done == run.n_frames and records[-1].total == run.n_frames

    xtc, pdb = make_xtc(tmp_path, n_frames=203)
    run = open_run([xtc], topology=pdb)
    with chunking(frames=16):
        got = drive(parallel.ranges_pass(run, {"a": FrameSums(), "b": FrameSums(atoms=(3, 7, 29))}, workers=2,
                                         start=11, stop=190))
    _same(got["a"], _serial(run, 11, 190, 16))
    _same(got["b"], _serial(run, 11, 190, 16, atoms=(3, 7, 29)))
    # ranges start at chunk multiples after the start: every chunk is a chunk of the serial pass
    assert all((f - 11) % 16 == 0 for f in got["a"]["first_frames"])


def test_a_consumer_without_merge_keeps_the_pass_serial(tmp_path):
    xtc, pdb = make_xtc(tmp_path)
    run = open_run([xtc], topology=pdb)
    with chunking(frames=8):
        got = drive(parallel.ranges_pass(run, {"s": NoMerge()}, workers=2))
    _same(got["s"], _serial(run, frames=8))


def test_workers_default_to_the_usable_cores_for_decode_bound_formats(monkeypatch, tmp_path):
    monkeypatch.delenv(parallel.WORKERS_ENV, raising=False)
    parallel.set_workers(None)
    xtc, pdb = make_xtc(tmp_path)
    assert parallel.workers_for(open_run([xtc], topology=pdb)) == min(61, parallel.usable_cores())
    assert parallel.workers_for(open_run([SAMPLES / "dimer_nve.h5md"])) == 1  # memory-bound: one process
    monkeypatch.setenv(parallel.WORKERS_ENV, "3")
    assert parallel.workers_for(open_run([SAMPLES / "dimer_nve.h5md"])) == 3
    try:
        parallel.set_workers(2)
        assert parallel.workers_for(open_run([xtc], topology=pdb)) == 2
    finally:
        parallel.set_workers(None)


# ------------------------------------------------------------------------------------- bad input, cancel


def _damage_frame(xtc: Path, frame: int) -> None:
    """Overwrite the start of one frame's compressed coordinates (its header and length stay intact, so
    the file opens and only reading that frame fails)."""
    from mdtraj.formats import XTCTrajectoryFile

    with XTCTrajectoryFile(str(xtc)) as f:
        off = int(f.offsets[frame])
    with open(xtc, "r+b") as fh:
        fh.seek(off + 92)
        fh.write(b"\xff" * 8)


def test_a_damaged_frame_in_one_worker_fails_the_pass_with_the_serial_error(tmp_path, capfd):
    xtc, pdb = make_xtc(tmp_path, n_frames=120)
    _damage_frame(xtc, 101)
    run = open_run([xtc], topology=pdb)
    with pytest.raises(CorruptFileError) as serial:
        _serial(run, frames=10)
    with pytest.raises(CorruptFileError) as par, chunking(frames=10):
        drive(parallel.ranges_pass(run, {"s": FrameSums()}, workers=2))
    assert str(par.value) == str(serial.value)
    assert par.value.path == serial.value.path == xtc and "100" in str(par.value)
    assert not any(p.is_alive() for p in __import__("multiprocessing").active_children())


def test_cancel_stops_every_worker(tmp_path):
    xtc, pdb = make_xtc(tmp_path, n_frames=400)
    run = open_run([xtc], topology=pdb)
    token = CancelToken()
    seen = []

    def on_progress(p):
        seen.append(p.done)
        if p.done > 0:
            token.cancel()

    t0 = time.monotonic()
    with pytest.raises(Cancelled), chunking(frames=4):
        drive(parallel.ranges_pass(run, {"s": FrameSums(pause_s=0.05)}, workers=2), on_progress, token)
    # serially the pass would take 100 chunks x 0.05 s = 5 s; stopped, it ends one chunk after the cancel
    assert time.monotonic() - t0 < 4.0 + 3.0  # generous: worker start-up on a loaded machine
    assert seen[-1] < 400
    assert not any(p.is_alive() for p in __import__("multiprocessing").active_children())
    assert threading.active_count() < 10


# --------------------------------------------------------------------------------------- the XTC index


def test_xtc_index_is_kept_and_a_changed_file_is_walked_again(tmp_path, cache_dir):
    from phasewake.core.readers import xdr

    xtc, pdb = make_xtc(tmp_path, n_frames=50)
    first = xdr.frame_index(xtc, ".xtc")
    assert not first.from_cache
    again = xdr.frame_index(xtc, ".xtc")
    assert again.from_cache
    for name in ("offsets", "time_ps", "step", "has_velocities"):
        np.testing.assert_array_equal(getattr(again, name), getattr(first, name))
    # the index agrees with mdtraj's own offsets and the times it reads
    import mdtraj as md
    from mdtraj.formats import XTCTrajectoryFile

    with XTCTrajectoryFile(str(xtc)) as f:
        np.testing.assert_array_equal(again.offsets, f.offsets)
    np.testing.assert_allclose(again.time_ps, md.load(str(xtc), top=str(pdb)).time, rtol=0, atol=1e-6)
    run = open_run([xtc], topology=pdb)
    np.testing.assert_array_equal(run.time_ps, first.time_ps)

    # a file changed since (here: ten frames more, as a run that went on) is a miss, walked afresh
    longer, _ = make_xtc(tmp_path, n_frames=60, name="u")
    shutil.copy(longer, xtc)
    changed = xdr.frame_index(xtc, ".xtc")
    assert not changed.from_cache and changed.n_frames == 60
    assert open_run([xtc], topology=pdb).n_frames == 60


def test_a_cut_xtc_is_refused_whether_or_not_its_index_was_kept(tmp_path, cache_dir):
    xtc, pdb = make_xtc(tmp_path, n_frames=20)
    open_run([xtc], topology=pdb)  # index kept
    data = xtc.read_bytes()
    xtc.write_bytes(data[:-17])
    with pytest.raises(CorruptFileError, match="after its last whole frame|truncated"):
        open_run([xtc], topology=pdb)
    assert struct.unpack(">i", data[:4])[0] == 1995


def test_run_pass_with_workers_goes_through_the_ranges(tmp_path, monkeypatch, spy_on):
    xtc, pdb = make_xtc(tmp_path, n_frames=90)
    run = open_run([xtc], topology=pdb)
    used = spy_on(parallel, "ranges_pass", lambda a, kw: kw.get("workers"))
    with chunking(frames=16):
        got = drive(run_pass(run, {"s": FrameSums()}, workers=2))
    assert used == [2]
    _same(got["s"], _serial(run, frames=16))
    # a small pass with nothing asked for stays in this process (workers would cost more than they save)
    monkeypatch.delenv(parallel.WORKERS_ENV, raising=False)
    with chunking(frames=16):
        drive(run_pass(run, {"s": FrameSums()}))
    assert used == [2]


def test_every_consumer_over_two_workers_equals_the_serial_pass():
    # the real consumers at once on a sample run with velocities, read by 2 worker processes in 4 ranges
    # (cuts at frames 384, 768 and 1152 of 1600; cuts inside transition paths: test_frame_merge.py); the
    # tolerances of the merge tests of each consumer there: frames exact, sums of float32 products
    # regrouped to 1e-5 relative (PCA), 1e-9 elsewhere
    from phasewake.core.analyses.coordinates import CoordinatesConsumer
    from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
    from phasewake.core.analyses.projection import PCAConsumer
    from phasewake.core.analyses.velocity import VACFConsumer

    run = open_run([SAMPLES / "dimer_nve.h5md"])

    def consumers():
        return {"q": CoordinatesConsumer(run, ["distance(0, 1)", "angle(0, 1, 2)"]),
                "T": GroupTemperatureConsumer(run), "v": VACFConsumer(run, max_lag_ps=0.2),
                "p": PCAConsumer(run, atom_indices=np.arange(12), n_components=3, method="exact")}

    with chunking(frames=128):
        serial = drive(run_pass(run, consumers(), workers=1))
        par = drive(parallel.ranges_pass(run, consumers(), workers=2))
    assert parallel.cut_ranges(0, 1600, 4, align=128) == [(0, 384), (384, 768), (768, 1152), (1152, 1600)]
    for a, b in zip(par["q"], serial["q"], strict=True):
        np.testing.assert_array_equal(a.time_ps, b.time_ps)
        np.testing.assert_allclose(a.values, b.values, rtol=1e-12)
        np.testing.assert_allclose(a.momentum, b.momentum, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(par["T"].temperature_K, serial["T"].temperature_K, rtol=1e-9)
    assert par["T"].n_dof == serial["T"].n_dof
    np.testing.assert_allclose(par["v"].vacf, serial["v"].vacf, rtol=1e-9, atol=1e-12)
    assert par["p"].n_frames == serial["p"].n_frames == run.n_frames
    np.testing.assert_allclose(par["p"].eigenvalues, serial["p"].eigenvalues, rtol=1e-5)


def test_an_xtc_run_travels_to_the_workers_and_is_not_opened_again(tmp_path):
    # XTC frames are portable (path, offsets, clock): the workers read them without the topology file,
    # which is gone by the time the pass runs; the result is still the serial pass's
    xtc, pdb = make_xtc(tmp_path, n_frames=120)
    run = open_run([xtc], topology=pdb)
    sent = parallel.travelling(run, parallel.files_of(run))
    assert sent.topology is None and sent.frames is run.frames and sent.paths == run.paths
    pdb.unlink()
    with chunking(frames=16):
        got = drive(parallel.ranges_pass(run, {"s": FrameSums(), "b": FrameSums(atoms=(4, 2))}, workers=2))
    _same(got["s"], _serial(run, frames=16))
    _same(got["b"], _serial(run, frames=16, atoms=(4, 2)))


def test_a_run_that_is_not_portable_is_opened_again_from_its_files(tmp_path):
    dcd, pdb = tmp_path / "d.dcd", tmp_path / "d.pdb"
    shutil.copy(SAMPLES / "dimer_nve.dcd", dcd)
    shutil.copy(SAMPLES / "dimer_nve.pdb", pdb)
    run = open_run([dcd], topology=pdb)
    assert isinstance(parallel.travelling(run, parallel.files_of(run)), parallel.RunFiles)
    pdb.unlink()  # the workers open the run again, so they need its topology file
    with pytest.raises(PhasewakeError, match="d.pdb"), chunking(frames=64):
        drive(parallel.ranges_pass(run, {"s": FrameSums()}, workers=2))


def test_a_consumer_with_a_large_state_gets_one_range_per_worker():
    # the exact PCA of 1,000 atoms sends back a 3,000 x 3,000 float64 matrix (72 MB) per range; a
    # coordinate sends a few bytes a frame
    from phasewake.core.analyses.projection import PCAConsumer
    from phasewake.core.readers.memory import run_from_arrays

    rng = np.random.default_rng(0)
    run = run_from_arrays(rng.standard_normal((10, 1000, 3)).astype(np.float32), np.arange(10.0), np.ones(1000))
    big = PCAConsumer(run, n_components=3, method="exact")
    assert big.state_bytes == 8 * 3000 * 3001
    assert parallel.ranges_per_worker({"pca": big}) == 1
    assert parallel.ranges_per_worker({"s": FrameSums()}) == 2
    small = PCAConsumer(run, atom_indices=np.arange(20), n_components=3, method="exact")
    assert parallel.ranges_per_worker({"pca": small, "s": FrameSums()}) == 2
