"""The Dask route (core/model/cluster.py) against a LocalCluster of 2 worker processes: the same frame
ranges give the serial pass's results, errors come back whole, an unreachable scheduler is one line."""

from __future__ import annotations

import numpy as np
import pytest

from phasewake.core.errors import CorruptFileError, InputError
from phasewake.core.model import cluster, parallel
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.settings import chunking
from tests.core.test_parallel import _damage_frame, _same, _serial, make_xtc
from tests.parallel_consumers import FrameSums

distributed = pytest.importorskip("distributed")

pytestmark = [pytest.mark.slow,
              # distributed's own start-up and shut-down talk (ports, event loops) is not ours to fix
              pytest.mark.filterwarnings("ignore::DeprecationWarning"),
              pytest.mark.filterwarnings("ignore::ResourceWarning"),
              pytest.mark.filterwarnings("ignore::UserWarning:distributed.*")]


@pytest.fixture(scope="module")
def local_cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                  worker_dashboard_address=None) as lc:
        yield lc


@pytest.fixture
def on_cluster(local_cluster):
    cluster.set_scheduler(local_cluster.scheduler_address)
    try:
        yield cluster.client()
    finally:
        cluster.set_scheduler(None)


def test_frame_ranges_on_the_cluster_equal_the_serial_pass(tmp_path, on_cluster):
    xtc, pdb = make_xtc(tmp_path, n_frames=150)
    run = open_run([xtc], topology=pdb)
    records = []
    with chunking(frames=8):
        got = drive(parallel.ranges_pass(run, {"a": FrameSums(), "b": FrameSums(atoms=(2, 9))}, start=3),
                    records.append)
    _same(got["a"], _serial(run, 3, None, 8))
    _same(got["b"], _serial(run, 3, None, 8, atoms=(2, 9)))
    assert records[-1].done == records[-1].total == 147
    # run_pass goes to the cluster as soon as a scheduler is set
    from phasewake.core.model.framepass import run_pass

    with chunking(frames=8):
        _same(drive(run_pass(run, {"s": FrameSums()}))["s"], _serial(run, 0, None, 8))


def test_dask_workers_read_in_this_process_s_chunks_and_budget(tmp_path, on_cluster):
    # the chunk setting travels with every range: a 2-frame budget (plain arithmetic: 30 atoms x 3 x 4 bytes
    # per float32 frame) cuts every worker's chunks, as it cuts the serial pass's
    xtc, pdb = make_xtc(tmp_path, n_frames=40)
    run = open_run([xtc], topology=pdb)
    atoms = tuple(range(30))
    with chunking(frames=8, mb=30 * 12 * 2 / 1e6):
        got = drive(parallel.ranges_pass(run, {"s": FrameSums(atoms=atoms)}))["s"]
        serial = _serial(run, atoms=atoms)
    assert max(np.diff([*got["first_frames"], 40])) <= 2
    _same(got, serial)


def test_a_damaged_frame_on_a_dask_worker_is_the_serial_error(tmp_path, on_cluster):
    xtc, pdb = make_xtc(tmp_path, n_frames=120)
    _damage_frame(xtc, 101)  # a frame whose damage the decoder notices (not every flipped byte is)
    run = open_run([xtc], topology=pdb)
    with pytest.raises(CorruptFileError) as serial:
        _serial(run, frames=10)
    with pytest.raises(CorruptFileError) as remote, chunking(frames=10):
        drive(parallel.ranges_pass(run, {"s": FrameSums()}))
    assert str(remote.value) == str(serial.value) and remote.value.path == xtc


def test_replicas_map_over_the_cluster_in_order(tmp_path, on_cluster):
    from phasewake.core.model import ranges

    runs = [ranges.RunFiles(paths=(str(p),), topology=str(q))
            for p, q in (make_xtc(tmp_path, n_frames=20 + 5 * k, name=f"r{k}") for k in range(3))]
    got = drive(parallel.map_workers(ranges.frame_count, [(f,) for f in runs], label="replicas"))
    assert got == [20, 25, 30]


def test_an_unreachable_scheduler_is_one_input_error():
    import socket

    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with pytest.raises(InputError, match="cannot reach the Dask scheduler"):
        cluster.set_scheduler(f"tcp://127.0.0.1:{port}")
    assert cluster.scheduler() is None
    with pytest.raises(InputError, match="expected an address"):
        cluster.set_scheduler("tcp://nohost")
    assert np.isfinite(cluster.CONNECT_TIMEOUT_S)
