"""``iter_chunks(positions=False)``: velocity-only reads give the velocities written to the file.

The reference is the data as written by h5py / mdtraj (libraries outside the project), not our own
reader's output.
"""

import numpy as np

from phasewake.core.readers.common import EstimatedVelocityFrames
from phasewake.core.readers.memory import ArrayFrames


def _data(n_frames=7, n_atoms=5):
    rng = np.random.default_rng(7)
    pos = rng.uniform(0, 3, (n_frames, n_atoms, 3)).astype(np.float32)
    vel = rng.standard_normal((n_frames, n_atoms, 3)).astype(np.float32)
    return pos, vel


def _h5md(path, pos, vel):
    import h5py

    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = np.array([1, 1])
        f["h5md"].create_group("author").attrs["name"] = "test"
        cr = f["h5md"].create_group("creator")
        cr.attrs["name"], cr.attrs["version"] = "test", "0"
        g = f.create_group("particles/all")
        box = g.create_group("box")
        box.attrs["dimension"] = 3
        box.attrs["boundary"] = np.array([b"none"] * 3)
        g.create_dataset("mass", data=np.full(pos.shape[1], 12.0)).attrs["unit"] = "u"
        for name, arr, unit in (("position", pos, "nm"), ("velocity", vel, "nm ps-1")):
            e = g.create_group(name)
            e.create_dataset("value", data=arr).attrs["unit"] = unit
            e.create_dataset("step", data=np.arange(arr.shape[0]) * 10)
            e.create_dataset("time", data=np.arange(arr.shape[0]) * 0.02).attrs["unit"] = "ps"
    return path


def _check(frames, vel, **kw):
    got = list(frames.iter_chunks(chunk_frames=3, velocities=True, positions=False, **kw))
    cols = kw.get("atom_indices")
    want = vel if cols is None else vel[:, cols]
    assert sum(c.n_frames for c in got) == want.shape[0]
    for c in got:
        assert c.positions_nm.shape == (c.n_frames, 0, 3)
    np.testing.assert_array_equal(np.concatenate([c.velocities_nm_per_ps for c in got]), want)
    assert [c.start for c in got] == list(range(0, want.shape[0], 3))


def test_memory_frames_skip_positions():
    pos, vel = _data()
    fr = ArrayFrames(pos, np.arange(7) * 0.02, vel)
    _check(fr, vel)
    _check(fr, vel, atom_indices=np.array([4, 1]))
    with_pos = list(fr.iter_chunks(chunk_frames=3))
    np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in with_pos]), pos)


def test_h5md_skips_positions(tmp_path):
    from phasewake.core.readers import open_run

    pos, vel = _data()
    run = open_run([_h5md(tmp_path / "a.h5md", pos, vel)])
    _check(run.frames, vel)
    _check(run.frames, vel, atom_indices=np.array([0, 3]))


def test_mdtraj_hdf5_skips_positions(tmp_path):
    # mdtraj's HDF5 layout (mdtraj/formats/hdf5.py, "Pande" conventions 1.1), written with h5py
    import json

    import h5py

    from phasewake.core.readers import open_run

    pos, vel = _data()
    top = {"chains": [{"index": 0, "residues": [
        {"index": i, "name": "C", "resSeq": i + 1, "atoms": [{"index": i, "name": "C", "element": "C"}]}
        for i in range(pos.shape[1])]}], "bonds": []}
    path = tmp_path / "a.h5"
    with h5py.File(path, "w") as f:
        f.attrs["conventions"] = b"Pande"
        f.attrs["conventionVersion"] = b"1.1"
        f.create_dataset("coordinates", data=pos).attrs["units"] = b"nanometers"
        f.create_dataset("time", data=np.arange(7) * 0.02).attrs["units"] = b"picoseconds"
        f.create_dataset("velocities", data=vel).attrs["units"] = b"nanometers/picosecond"
        f.create_dataset("topology", data=[json.dumps(top).encode()])
    run = open_run([path])
    _check(run.frames, vel)


def test_estimated_velocities_without_positions():
    # central differences (x(t+1) - x(t-1)) / (2 dt) computed here with numpy, one-sided at the ends
    pos, _ = _data()
    t = np.arange(7) * 0.02
    inner = ArrayFrames(pos, t)
    est = EstimatedVelocityFrames(inner, t)
    p64 = pos.astype(np.float64)
    want = np.empty_like(p64)
    want[1:-1] = (p64[2:] - p64[:-2]) / (t[2:] - t[:-2])[:, None, None]
    want[0] = (p64[1] - p64[0]) / (t[1] - t[0])
    want[-1] = (p64[-1] - p64[-2]) / (t[-1] - t[-2])
    got = list(est.iter_chunks(chunk_frames=3, velocities=True, positions=False))
    assert all(c.positions_nm.shape == (c.n_frames, 0, 3) for c in got)
    np.testing.assert_allclose(np.concatenate([c.velocities_nm_per_ps for c in got]), want, rtol=1e-5)


def test_h5md_few_atoms_read_as_a_hyperslab(tmp_path):
    # a few nearby atoms (unsorted, repeated) are read as one hyperslab; the values are those written
    from phasewake.core.readers import open_run

    pos, vel = _data(n_frames=9, n_atoms=12)
    run = open_run([_h5md(tmp_path / "b.h5md", pos, vel)])
    for cols in (np.array([3, 1, 3]), np.array([4, 5, 6]), np.array([0, 11])):
        got = list(run.frames.iter_chunks(chunk_frames=4, atom_indices=cols))
        np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in got]), pos[:, cols])
        np.testing.assert_array_equal(np.concatenate([c.velocities_nm_per_ps for c in got]), vel[:, cols])
        strided = list(run.frames.iter_chunks(chunk_frames=2, start=1, stride=3, atom_indices=cols))
        np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in strided]), pos[1::3][:, cols])


def test_h5md_reused_buffers_never_overwrite_data_still_held(tmp_path):
    # chunk buffers are reused only when nothing else refers to them: a consumer that keeps a view of
    # an earlier chunk, or the chunks themselves, still sees the values written by h5py
    from phasewake.core.readers import open_run

    pos, vel = _data(n_frames=40, n_atoms=6)
    run = open_run([_h5md(tmp_path / "c.h5md", pos, vel)])
    kept_views, kept_chunks, addresses = [], [], set()
    for i, c in enumerate(run.frames.iter_chunks(chunk_frames=4)):
        addresses.add(c.velocities_nm_per_ps.__array_interface__["data"][0])
        if i % 3 == 0:
            kept_views.append((c.start, c.velocities_nm_per_ps[1:]))
        if i % 4 == 1:
            kept_chunks.append(c)
    for start, view in kept_views:
        np.testing.assert_array_equal(view, vel[start + 1 : start + 4])
    for c in kept_chunks:
        np.testing.assert_array_equal(c.positions_nm, pos[c.start : c.start + 4])
        np.testing.assert_array_equal(c.velocities_nm_per_ps, vel[c.start : c.start + 4])
    assert len(addresses) < 10  # buffers were reused for the chunks nobody kept
