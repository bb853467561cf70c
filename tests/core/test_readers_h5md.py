"""H5MD 1.1: our writer follows the spec layout, and files written with plain h5py in the spec layout
read correctly. Reference: de Buyl, Colberg and Hoefling, Comput. Phys. Commun. 185, 1546 (2014), and the
H5MD 1.1 specification (scalar step/time with offset, units as space-separated factors)."""

import h5py
import numpy as np
import pytest

from phasewake.core.errors import MissingDataError, TimeAxisError, UnitError
from phasewake.core.readers import open_run
from phasewake.core.readers.h5md import read_h5md, write_h5md


def _arrays(n_frames=12, n_atoms=7, seed=0):
    rng = np.random.default_rng(seed)
    pos = rng.normal(size=(n_frames, n_atoms, 3)).astype(np.float32)
    vel = rng.normal(size=(n_frames, n_atoms, 3)).astype(np.float32)
    time = 0.25 + 0.02 * np.arange(n_frames)
    step = 100 + 10 * np.arange(n_frames)
    return pos, vel, time, step


def test_writer_layout_follows_spec(tmp_path):
    import mdtraj as md

    pos, vel, time, step = _arrays()
    top = md.Topology()
    ch = top.add_chain()
    for i in range(7):
        r = top.add_residue("ARX", ch, resSeq=i + 1)
        top.add_atom(f"A{i}", md.element.argon, r)
    atoms = list(top.atoms)
    top.add_bond(atoms[0], atoms[1])
    path = tmp_path / "ours.h5md"
    write_h5md(path, positions_nm=pos, time_ps=time, step=step, velocities_nm_per_ps=vel,
               box_nm=np.array([3.0, 3.0, 3.0]), masses_amu=np.full(7, 39.948), topology=top,
               observables={"potential_energy": (np.linspace(0, 1, 12), "kJ mol-1")},
               parameters={"timestep_ps": 0.002, "ensemble": "NVE", "n_constraints": 0})
    with h5py.File(path, "r") as f:
        # /h5md: version [1, 1], author (name), creator (name, version)  [de Buyl et al. 2014, sec. "H5MD root"]
        assert list(f["h5md"].attrs["version"]) == [1, 1]
        assert "name" in f["h5md/author"].attrs
        assert {"name", "version"} <= set(f["h5md/creator"].attrs)
        g = f["particles/all"]
        # time-dependent element = group {value [frames][N][D], step, time}
        assert g["position/value"].shape == (12, 7, 3)
        assert g["position/step"].shape == (12,) and g["position/time"].shape == (12,)
        assert g["position/value"].attrs["unit"] in ("nm", b"nm")
        assert g["velocity/value"].attrs["unit"] in ("nm ps-1", b"nm ps-1")
        # box: attributes dimension and boundary; edges D-vector for a rectangular box
        assert int(g["box"].attrs["dimension"]) == 3
        assert [b.decode() if isinstance(b, bytes) else b for b in g["box"].attrs["boundary"]] == ["periodic"] * 3
        assert g["box/edges"].shape == (3,)
        # elements sampled together share step/time (hard links allowed by the spec)
        assert g["velocity/step"].id == g["position/step"].id
        assert f["observables/potential_energy/value"].shape == (12,)
        # connectivity: int[M][2] with a particles_group object reference
        assert f["connectivity/bonds"].shape == (1, 2)
        assert f[f["connectivity/bonds"].attrs["particles_group"]].name == "/particles/all"
    # read back equal
    run = open_run([path])
    ch = next(run.frames.iter_chunks(chunk_frames=100))
    np.testing.assert_array_equal(ch.positions_nm, pos)
    np.testing.assert_array_equal(ch.velocities_nm_per_ps, vel)
    np.testing.assert_allclose(run.time_ps, time, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(ch.box_nm[3], np.diag([3.0, 3.0, 3.0]))
    assert run.metadata.timestep_ps == 0.002 and run.metadata.ensemble == "NVE"
    assert run.metadata.n_constraints == 0 and run.metadata.constraints_source == "metadata"
    assert run.topology.n_bonds == 1 and [a.name for a in run.topology.atoms][:2] == ["A0", "A1"]
    np.testing.assert_array_equal(run.masses_amu, np.full(7, 39.948))
    assert run.energies.by_role("potential").unit == "kJ/mol"
    assert not run.frames.velocities_estimated


def _spec_file(path, *, with_positions=True, time_scalar=True, thermo=False):
    """Written with plain h5py in the H5MD 1.1 layout (not through our writer)."""
    n_frames, n_atoms = 10, 4
    rng = np.random.default_rng(5)
    pos_A = rng.normal(size=(n_frames, n_atoms, 3)) * 10  # in Angstrom ("10-1 nm" written as unit)
    vel = rng.normal(size=(n_frames // 2, n_atoms, 3))  # every other frame, in A/fs
    with h5py.File(path, "w") as f:
        h = f.create_group("h5md")
        h.attrs["version"] = np.array([1, 1])
        h.create_group("author").attrs["name"] = np.bytes_("test author")
        c = h.create_group("creator")
        c.attrs["name"] = "hand-written"
        c.attrs["version"] = "1"
        if thermo:
            h.create_group("modules").create_group("thermodynamics").attrs["version"] = np.array([1, 0])
        g = f.create_group("particles/solvent")
        box = g.create_group("box")
        box.attrs["dimension"] = 3
        box.attrs["boundary"] = np.array([b"periodic", b"periodic", b"periodic"])
        edges = np.array([[2.0, 0.0, 0.0], [0.5, 2.0, 0.0], [0.3, 0.4, 2.0]])  # triclinic, rows = edge vectors
        box.create_dataset("edges", data=edges).attrs["unit"] = "nm"
        if with_positions:
            p = g.create_group("position")
            p.create_dataset("value", data=pos_A).attrs["unit"] = np.bytes_("10-1 nm")
            s = p.create_dataset("step", data=5)  # scalar step: s(i) = i*5 + offset  [H5MD 1.1]
            s.attrs["offset"] = 1000
            if time_scalar:
                t = p.create_dataset("time", data=0.01)
                t.attrs["offset"] = 2.0
                t.attrs["unit"] = "ps"
        v = g.create_group("velocity")
        v.create_dataset("value", data=vel).attrs["unit"] = "A fs-1"
        v.create_dataset("step", data=1000 + 10 * np.arange(n_frames // 2))  # steps of frames 0, 2, 4, ...
        v.create_dataset("time", data=2.0 + 0.02 * np.arange(n_frames // 2)).attrs["unit"] = "ps"
        g.create_dataset("mass", data=np.array([1.0, 2.0, 3.0, 4.0])).attrs["unit"] = "u"
        # a second group without positions
        f.create_group("particles/tracer").create_dataset("mass", data=[1.0])
        o = f.create_group("observables/thermo/potential_energy")  # observable in a subgroup
        o.create_dataset("value", data=np.linspace(-1, 1, n_frames)).attrs["unit"] = "kcal mol-1"
        st = o.create_dataset("step", data=5)
        st.attrs["offset"] = 1000
        tt = o.create_dataset("time", data=0.01)
        tt.attrs["offset"] = 2.0
        tt.attrs["unit"] = "ps"
        if thermo:
            f["observables"].create_dataset("particle_number", data=4)
    return pos_A, vel, edges


def test_spec_file_written_with_h5py(tmp_path):
    path = tmp_path / "spec.h5"
    pos_A, vel, edges = _spec_file(path)
    run = open_run([path])
    # scalar step/time with offset: t(i) = i * 0.01 + 2.0 ps  (H5MD 1.1)
    np.testing.assert_allclose(run.time_ps, 2.0 + 0.01 * np.arange(10), rtol=0, atol=1e-12)
    ch = next(run.frames.iter_chunks(chunk_frames=100, velocities=False))
    np.testing.assert_allclose(ch.positions_nm, pos_A * 0.1, rtol=1e-6)  # 10-1 nm = 0.1 nm = 1 Angstrom
    np.testing.assert_allclose(ch.box_nm[0], edges)  # triclinic edge vectors kept as rows
    assert run.frames.has_box
    np.testing.assert_array_equal(run.masses_amu, [1, 2, 3, 4])
    # velocities at every other frame, aligned by step (not by index)
    assert run.frames.velocities_estimated  # the whole-run source estimates; the stored subset is below
    assert any("velocities are stored at 5 of 10 frames" in w for w in run.warnings)
    c = read_h5md(path)
    sub = c.frames.with_velocities_only()
    assert sub.n_frames == 5 and sub.has_velocities
    chv = next(sub.iter_chunks(chunk_frames=10))
    np.testing.assert_allclose(chv.time_ps, 2.0 + 0.02 * np.arange(5), atol=1e-12)
    np.testing.assert_allclose(chv.positions_nm, pos_A[::2] * 0.1, rtol=1e-6)
    np.testing.assert_allclose(chv.velocities_nm_per_ps, vel * 0.1 / 1e-3, rtol=1e-6)  # A/fs -> nm/ps = x100
    # observables in subgroups, with units converted (kcal/mol x 4.184, NIST SP 811)
    pe = run.energies.by_role("potential")
    assert pe.name == "thermo/potential_energy"
    np.testing.assert_allclose(pe.values, np.linspace(-1, 1, 10) * 4.184)
    np.testing.assert_allclose(run.energies.time_ps, run.time_ps)
    assert not any("particle groups with positions" in w for w in run.warnings)  # only "solvent" has them


def test_thermodynamics_module_per_particle(tmp_path):
    # H5MD thermodynamics module: energies are per-particle averages; total = value * particle_number
    path = tmp_path / "thermo.h5md"
    _spec_file(path, thermo=True)
    run = open_run([path])
    np.testing.assert_allclose(run.energies.by_role("potential").values, np.linspace(-1, 1, 10) * 4.184 * 4)


def test_group_choice_and_no_positions(tmp_path):
    path = tmp_path / "spec.h5md"
    _spec_file(path)
    assert open_run([path], group="solvent").n_atoms == 4
    with pytest.raises(MissingDataError, match="tracer"):
        open_run([path], group="tracer")
    bad = tmp_path / "nopos.h5md"
    _spec_file(bad, with_positions=False)
    with pytest.raises(MissingDataError, match="no particle group has positions") as info:
        open_run([bad])
    assert info.value.path == bad


def test_time_dependent_triclinic_box_and_stride(tmp_path):
    pos, vel, time, step = _arrays(n_frames=9)
    box = np.zeros((9, 3, 3))
    box[:, 0, 0] = 2 + 0.01 * np.arange(9)
    box[:, 1, :2] = [0.3, 2.0]
    box[:, 2] = [0.1, 0.2, 2.5]
    path = tmp_path / "box.h5md"
    write_h5md(path, positions_nm=pos[:9], time_ps=time[:9], step=step[:9], box_nm=box)
    run = open_run([path])
    chunks = list(run.frames.iter_chunks(chunk_frames=2, start=1, stride=3, velocities=False))
    got = np.concatenate([c.box_nm for c in chunks])
    np.testing.assert_allclose(got, box[1::3])
    np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in chunks]), pos[1:9:3])
    assert [c.start for c in chunks] == [1, 7]
    np.testing.assert_array_equal(run.frames.read_frame(-1).positions_nm[0], pos[8])


def test_non_monotonic_time_is_reported(tmp_path):
    # was: TimeAxisError. Time going back is a restart glued in: the later segment is kept (frames 2 and 3,
    # at or after the restart time, are dropped), the join is reported, and the kept frames read right.
    pos, vel, time, step = _arrays(n_frames=6)
    t = time.copy()
    t[4] = t[2]  # goes backwards at frame 4
    t[5] = t[3]
    path = tmp_path / "back.h5md"
    write_h5md(path, positions_nm=pos, time_ps=t, step=step, velocities_nm_per_ps=vel)
    run = open_run([path])
    np.testing.assert_allclose(run.time_ps, t[[0, 1, 4, 5]])
    assert any("frame 4" in w and "later segment is kept" in w for w in run.warnings)
    (join,) = run.metadata.extra["frame_joins"]
    assert join.time_ps == pytest.approx(t[2]) and join.n_dropped == 2
    got = np.concatenate([c.positions_nm for c in run.frames.iter_chunks(chunk_frames=3)])
    np.testing.assert_array_equal(got, pos[[0, 1, 4, 5]])
    np.testing.assert_array_equal(run.frames.read_frame(2).velocities_nm_per_ps[0], vel[4])
    strided = list(run.frames.iter_chunks(start=1, stride=2))
    assert [c.start for c in strided] == [1, 3]  # kept frames 1 and 3 (inner 1 and 5)
    np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in strided]), pos[[1, 5]])
    bad = t.copy()
    bad[[1, 3, 5]] = bad[0] - 1.0  # back at every other frame: unsorted, refused
    write_h5md(tmp_path / "unsorted.h5md", positions_nm=pos, time_ps=bad, step=step)
    with pytest.raises(TimeAxisError, match="unsorted"):
        open_run([tmp_path / "unsorted.h5md"])


def test_missing_position_unit(tmp_path):
    path = tmp_path / "nounit.h5md"
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = [1, 1]
        p = f.create_group("particles/all/position")
        p.create_dataset("value", data=np.zeros((2, 1, 3)))
        p.create_dataset("step", data=[0, 1])
    with pytest.raises(UnitError, match="position has no unit"):
        open_run([path])


def test_observable_on_its_own_time_axis(tmp_path):
    # name -> (values, unit, time) puts an observable on its own axis; it is kept, aligned by step
    pos, _, time, step = _arrays(n_frames=10)
    path = tmp_path / "obs.h5md"
    write_h5md(path, positions_nm=pos, time_ps=time, step=step,
               observables={"potential_energy": (np.arange(10.0), "kJ mol-1"),
                            "temperature": (np.array([300.0, 301.0, 302.0]), "K", time[[0, 4, 8]])})
    run = open_run([path])
    assert run.energies.by_role("temperature") is None
    (other,) = run.metadata.extra["other_energy_tables"]
    np.testing.assert_allclose(other.time_ps, time[[0, 4, 8]])
    assert other.by_role("temperature").values.tolist() == [300.0, 301.0, 302.0]
    with h5py.File(path, "r") as f:  # its steps are on the frames' clock (align by step, H5MD)
        assert f["observables/temperature/step"][()].tolist() == step[[0, 4, 8]].tolist()


def test_gap_in_frame_times_is_warned(tmp_path):
    pos, _, time, step = _arrays(n_frames=8)
    t = time.copy()
    t[5:] += 1.0
    path = tmp_path / "gap.h5md"
    write_h5md(path, positions_nm=pos, time_ps=t, step=step)
    run = open_run([path])
    assert any("gap(s) in the time axis" in w and "frame 4" in w for w in run.warnings)


def test_image_element_unwraps_positions(tmp_path):
    # H5MD: "image" holds the periodic image of each particle; unwrapped = position + image . edges
    edges = np.array([[2.0, 0.0, 0.0], [0.5, 2.0, 0.0], [0.3, 0.4, 2.0]])
    rng = np.random.default_rng(9)
    unwrapped = rng.normal(size=(6, 5, 3)) * 3
    frac = unwrapped @ np.linalg.inv(edges)
    image = np.floor(frac)
    wrapped = (frac - image) @ edges
    path = tmp_path / "img.h5md"
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = [1, 1]
        g = f.create_group("particles/all")
        b = g.create_group("box")
        b.attrs["dimension"] = 3
        b.attrs["boundary"] = np.array([b"periodic"] * 3)
        b.create_dataset("edges", data=edges).attrs["unit"] = "nm"
        p = g.create_group("position")
        p.create_dataset("value", data=wrapped).attrs["unit"] = "nm"
        p.create_dataset("step", data=np.arange(6))
        p.create_dataset("time", data=np.arange(6.0)).attrs["unit"] = "ps"
        im = g.create_group("image")
        im.create_dataset("value", data=image.astype(np.int32))
        im["step"] = p["step"]
    run = open_run([path])
    got = next(run.frames.iter_chunks(chunk_frames=10, velocities=False)).positions_nm
    np.testing.assert_allclose(got, unwrapped, atol=2e-5)
    assert "images" in run.metadata.sources


def test_chunks_kept_by_a_consumer_are_never_overwritten(tmp_path):
    # The reader reuses its chunk buffers: a consumer that keeps every chunk (or only a view of one) must
    # still see the data of its own frames, equal to what was written.
    pos, vel, time, step = _arrays(n_frames=40, n_atoms=5)
    path = tmp_path / "keep.h5md"
    write_h5md(path, positions_nm=pos, time_ps=time, step=step, velocities_nm_per_ps=vel)
    frames = open_run([path]).frames
    kept = list(frames.iter_chunks(chunk_frames=3))
    views = [c.velocities_nm_per_ps[:, 1] for c in frames.iter_chunks(chunk_frames=4)]
    np.testing.assert_array_equal(np.concatenate([c.positions_nm for c in kept]), pos)
    np.testing.assert_array_equal(np.concatenate([c.velocities_nm_per_ps for c in kept]), vel)
    np.testing.assert_array_equal(np.concatenate(views), vel[:, 1])


def test_buffer_pool_lends_a_buffer_again_only_once_its_loan_is_gone():
    from phasewake.core.readers.h5md_frames import BufferPool

    def address(a):
        return a.__array_interface__["data"][0]

    pool = BufferPool(size=4)
    a = pool.lend((3, 2, 3), np.float32)
    first = address(a)
    view = a[1:, 0]  # a view alone keeps the loan
    del a
    b = pool.lend((3, 2, 3), np.float32)
    assert address(b) != first
    del view
    c = pool.lend((2, 2, 3), np.float32)  # smaller: fits in the freed buffer
    assert address(c) == first and c.shape == (2, 2, 3) and c.flags.writeable
