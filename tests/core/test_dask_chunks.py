"""The analysis kernels are chunk reductions (update per chunk, then finish), so they run unchanged
over the blocks of a distributed array. Here: two kernels fed from dask.array blocks along
the time axis give exactly what they give on the whole in-memory array.
"""

import numpy as np
import pytest

da = pytest.importorskip("dask.array", reason="dask is not installed: the distributed-array route is optional")


def _blocks_in_time_order(x):
    # A dask array chunked along axis 0 only; each block is computed when it is reached.
    assert len(x.chunks[1:]) == 0 or all(len(c) == 1 for c in x.chunks[1:])
    for i in range(x.numblocks[0]):
        yield np.asarray(x.blocks[i].compute())


def test_thirumalai_mountain_over_dask_blocks():
    from phasewake.core.analyses.sampling import TMAccumulator

    rng = np.random.default_rng(5)
    e = rng.standard_normal((4000, 50)).cumsum(axis=0) * 0.01 + rng.standard_normal((4000, 50))
    whole = TMAccumulator()
    whole.update(e)
    ref = whole.finish(dt_ps=0.01)
    acc = TMAccumulator()
    for block in _blocks_in_time_order(da.from_array(e, chunks=(333, 50))):
        acc.update(block)
    got = acc.finish(dt_ps=0.01)
    np.testing.assert_allclose(got.omega, ref.omega, rtol=1e-12)
    assert got.d_per_ps == pytest.approx(ref.d_per_ps, rel=1e-10)


def test_rigid_pair_inference_over_dask_blocks():
    from phasewake.core.analyses.temperature import RigidPairAccumulator

    rng = np.random.default_rng(6)
    n_frames = 600
    # atoms 0-1 rigid (fixed bond of 0.1 nm), atoms 2-3 flexible
    a = rng.uniform(0, 2, size=(n_frames, 3))
    u = rng.standard_normal((n_frames, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    b = a + 0.1 * u
    c = rng.uniform(0, 2, size=(n_frames, 3))
    d = c + (0.15 + 0.02 * rng.standard_normal((n_frames, 1))) * u
    pos = np.stack([a, b, c, d], axis=1).astype(np.float32)
    pairs = np.array([[0, 1], [2, 3]])
    whole = RigidPairAccumulator(pairs, 4, max_frames=n_frames)
    whole.update(pos)
    ref = whole.finish()
    acc = RigidPairAccumulator(pairs, 4, max_frames=n_frames)
    for block in _blocks_in_time_order(da.from_array(pos, chunks=(64, 4, 3))):
        acc.update(block)
    got = acc.finish()
    assert got.rigid_pairs.tolist() == ref.rigid_pairs.tolist() == [[0, 1]]
    assert got.n_constraints == ref.n_constraints == 1
