"""One pass over the frames for many analyses: each consumer equals its separate analysis, and
the frames are read once.

The separate analyses are themselves tested against outside references (analytic results, scipy,
statsmodels, mdtraj) in their own test files; here the check is that feeding them from one shared pass
changes nothing, plus direct checks of the kinetic energy against its definition K = sum m v^2 / 2.
"""

from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses.coordinates import CoordinatesConsumer, compute_coordinates
from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
from phasewake.core.analyses.projection import PCAConsumer, PCAProjectionConsumer
from phasewake.core.analyses.velocity import VACFConsumer, vacf
from phasewake.core.errors import CoordinateSpecError
from phasewake.core.model.framepass import FramePass, run_pass
from phasewake.core.model.run import RunMetadata
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking
from tests.counting import CountingFrames, counted

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
KB = 0.00831446261815324  # kJ/mol/K, CODATA 2018 (from memory; R/1000)




_counting = counted


def _synthetic(n_frames=300, n_atoms=12, seed=7, box=True):
    rng = np.random.default_rng(seed)
    masses = rng.uniform(1.0, 16.0, n_atoms)
    pos = rng.uniform(0.0, 2.0, (n_frames, n_atoms, 3)).astype(np.float32)
    # velocities with a memory (AR(1)) so the VACF is not trivial
    v = np.empty((n_frames, n_atoms, 3))
    v[0] = rng.standard_normal((n_atoms, 3))
    for t in range(1, n_frames):
        v[t] = 0.9 * v[t - 1] + np.sqrt(1 - 0.81) * rng.standard_normal((n_atoms, 3))
    v /= np.sqrt(masses)[None, :, None]
    time = np.arange(n_frames) * 0.01
    return run_from_arrays(pos, time, masses, velocities_nm_per_ps=v.astype(np.float32),
                           box_nm=np.array([2.5, 2.5, 2.5]) if box else None,
                           metadata=RunMetadata(n_constraints=0, com_motion_removed=False))


def _assert_series_equal(a, b, tol=1e-10):
    assert len(a) == len(b)
    for sa, sb in zip(a, b, strict=True):
        for f in fields(sa):
            x, y = getattr(sa, f.name), getattr(sb, f.name)
            if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
                assert x is not None and y is not None, f.name
                assert x.shape == y.shape, f.name
                np.testing.assert_allclose(x, y, rtol=tol, atol=0, err_msg=f.name)
            else:
                assert x == y, f.name


SPECS = ["distance(0, 1)", "angle(0, 1, 2)", "dihedral(2, 3, 4, 5)", "com_distance([0, 1], [6-8])", "rg(3-9)",
         "x(5)"]


def test_coordinates_equal_compute_coordinates_synthetic():
    run = _synthetic()
    with chunking(frames=64):
        sep = drive(compute_coordinates(run, SPECS, start=10, stop=250))
        got = drive(run_pass(run, {"q": CoordinatesConsumer(run, SPECS)}, start=10, stop=250))["q"]
    _assert_series_equal(got, sep)


@pytest.mark.parametrize("name", ["dimer_nve.h5md", "dimer_langevin.h5md"])
def test_coordinates_equal_on_sample_runs(name):
    run = open_run([SAMPLES / name])
    specs = ["distance(0, 1)"]
    sep = drive(compute_coordinates(run, specs))
    got = drive(run_pass(run, {"q": CoordinatesConsumer(run, specs)}))["q"]
    _assert_series_equal(got, sep)


def test_coordinates_without_velocities_fall_back_like_compute_coordinates():
    rng = np.random.default_rng(3)
    pos = rng.uniform(0, 1, (50, 4, 3))
    run = run_from_arrays(pos, np.arange(50) * 0.002, np.ones(4))
    sep = drive(compute_coordinates(run, ["distance(0, 3)"]))
    got = drive(run_pass(run, {"q": CoordinatesConsumer(run, ["distance(0, 3)"])}))["q"]
    _assert_series_equal(got, sep)
    assert got[0].velocities_estimated


def test_pc_specs_are_refused():
    run = _synthetic(n_frames=20)
    with pytest.raises(CoordinateSpecError):
        CoordinatesConsumer(run, ["pc(1, 0-5)"])


def test_vacf_equals_vacf_synthetic_groups_and_mass_weighting():
    run = _synthetic()
    groups = {"a": [0, 2, 4], "b": [5, 6, 7, 8]}
    sep = drive(vacf(run, groups=groups, mass_weighted=True, max_lag_ps=0.5, start=5, stop=280))
    with chunking(frames=37):
        got = drive(run_pass(run, {"v": VACFConsumer(run, groups=groups, mass_weighted=True, max_lag_ps=0.5,
                                                     start=5, stop=280)}, start=5, stop=280))["v"]
    for f in fields(sep):
        x, y = getattr(sep, f.name), getattr(got, f.name)
        if isinstance(x, np.ndarray):
            np.testing.assert_allclose(y, x, rtol=1e-10, atol=1e-12, err_msg=f.name)
        else:
            assert x == y, f.name
    # C(0) of the mass-weighted VACF is <m v^2> per atom, the mean of 2 K_i over frames (definition)
    v = np.asarray(run.frames._vel[5:280], dtype=np.float64)
    m = run.masses_amu
    c0 = np.mean(np.einsum("fia,fia,i->fi", v, v, m)[:, [0, 2, 4]])
    assert got.vacf[0, 0] == pytest.approx(c0, rel=1e-5)


def test_vacf_equals_vacf_sample_run():
    run = open_run([SAMPLES / "dimer_nve.h5md"])
    sep = drive(vacf(run))
    got = drive(run_pass(run, {"v": VACFConsumer(run)}))["v"]
    np.testing.assert_allclose(got.vacf, sep.vacf, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(got.lag_ps, sep.lag_ps, rtol=1e-12)
    assert got.settings == sep.settings


def test_group_temperatures_match_definition_and_audit():
    from phasewake.core.analyses.audit import audit_run

    run = _synthetic(n_frames=200, n_atoms=30, box=False)
    groups = {"first": np.arange(0, 10), "second": np.arange(10, 30)}
    res = drive(run_pass(run, {"T": GroupTemperatureConsumer(run, groups=groups, n_com=0, n_constraints=0)}))["T"]
    v = np.asarray(run.frames._vel, dtype=np.float64)
    m = run.masses_amu
    # K = sum_i m_i v_i^2 / 2 (definition); T = 2 K / (N_dof k_B) with N_dof = 3 N (no COM removed)
    k_ref = 0.5 * np.einsum("fia,fia,i->f", v, v, m)
    np.testing.assert_allclose(res.kinetic_kJ_per_mol, k_ref, rtol=1e-6)
    np.testing.assert_allclose(res.temperature_K, 2 * k_ref / (90 * KB), rtol=1e-6)
    k1 = 0.5 * np.einsum("fia,fia,i->f", v[:, :10], v[:, :10], m[:10])
    np.testing.assert_allclose(res.group_kinetic_kJ_per_mol[:, 0], k1, rtol=1e-6)
    assert res.groups[0].mean_K == pytest.approx(float(np.mean(2 * k1 / (30 * KB))), rel=1e-6)
    # the audit's own frame pass (float32 BLAS sums) with the same groups and counting
    au = drive(audit_run(run, groups=groups, n_constraints=0))
    ta = au.temperature
    assert ta is not None and ta.n_dof == res.n_dof
    np.testing.assert_allclose(res.temperature_K, ta.temperature_K, rtol=1e-5)
    by_name = {g.name: g for g in ta.groups}
    for g in res.groups:
        a = by_name[g.name]
        assert g.n_dof == pytest.approx(a.n_dof, rel=1e-12)
        assert g.mean_K == pytest.approx(a.mean_K, rel=1e-5)


def test_frames_are_read_once_for_three_analyses():
    import dataclasses

    run0 = _synthetic()
    asked = []

    class Spy(CountingFrames):
        def iter_chunks(self, **kw):
            asked.append(kw)
            return super().iter_chunks(**kw)

    counter = Spy(run0.frames)
    run = dataclasses.replace(run0, frames=counter)
    fp = FramePass(run, start=0, stop=None)
    fp.add("q", CoordinatesConsumer(run, ["distance(0, 1)", "angle(0, 1, 2)"]))
    fp.add("T", GroupTemperatureConsumer(run, n_com=0)).add("v", VACFConsumer(run, max_lag_ps=0.3))
    with chunking(frames=50):
        out = drive(fp.work())
    assert set(out) == {"q", "T", "v"}
    if run.n_atoms >= 12:  # the coordinates' 3 atoms are read apart; everybody's velocities without positions
        assert counter.calls == 2
        np.testing.assert_array_equal(asked[0]["atom_indices"], [0, 1, 2])
        assert asked[0].get("positions", True) and not asked[1].get("positions", True)
        assert asked[1].get("atom_indices") is None
    else:
        assert counter.calls == 1
    assert counter.frames_read == counter.calls * run.n_frames  # every frame once per read
    # the separate analyses read the frames once each, and agree with the pass
    with chunking(frames=50):
        sep_q = drive(compute_coordinates(run, ["distance(0, 1)", "angle(0, 1, 2)"]))
    sep_v = drive(vacf(run, max_lag_ps=0.3))
    np.testing.assert_allclose(out["v"].vacf, sep_v.vacf, rtol=1e-10)
    for a, b in zip(out["q"], sep_q, strict=True):
        np.testing.assert_array_equal(a.values, b.values)
        np.testing.assert_allclose(a.momentum, b.momentum, rtol=1e-12)


def test_velocity_only_pass_does_not_ask_for_positions():
    run0 = _synthetic(n_frames=40)
    seen = []

    class Spy(CountingFrames):
        def iter_chunks(self, **kw):
            seen.append(kw)
            return super().iter_chunks(**kw)

    import dataclasses

    run = dataclasses.replace(run0, frames=Spy(run0.frames))
    drive(run_pass(run, {"v": VACFConsumer(run, groups={"a": [1, 3]})}))
    assert seen[0]["positions"] is False and seen[0]["velocities"] is True
    np.testing.assert_array_equal(seen[0]["atom_indices"], [1, 3])


@pytest.mark.slow  # measured 0.8 s of CPU
def test_dask_blocks_drive_the_same_consumer():
    """The chunk reduction over dask.array blocks gives the same VACF (DEVELOPERS.md, Scaling out)."""
    da = pytest.importorskip("dask.array", reason="dask is not installed")
    from phasewake.core.model.run import FrameChunk

    run = _synthetic(n_frames=120)
    vel = da.from_array(run.frames._vel, chunks=(25, -1, -1))
    c = VACFConsumer(run, max_lag_ps=0.2)
    c.prepare(None, start=0, stop=run.n_frames, chunk_frames=25)
    t0 = 0
    for block in vel.blocks:
        arr = np.asarray(block.compute(scheduler="synchronous"))
        c.update(FrameChunk(start=t0, time_ps=run.time_ps[t0:t0 + arr.shape[0]],
                            positions_nm=np.empty((arr.shape[0], 0, 3), np.float32), velocities_nm_per_ps=arr))
        t0 += arr.shape[0]
    got = c.finish()
    sep = drive(vacf(run, max_lag_ps=0.2))
    np.testing.assert_allclose(got.vacf, sep.vacf, rtol=1e-10)


# ------------------------------------------------------------------------------------------------------
# PCA in the shared pass


def _pca_equal(a, b, tol=1e-10):
    from phasewake.core.analyses.projection import PCAResult

    assert isinstance(a, PCAResult) and isinstance(b, PCAResult)
    for f in fields(a):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
            assert x is not None and y is not None, f.name
            np.testing.assert_allclose(x, y, rtol=tol, atol=tol * np.abs(y).max(), err_msg=f.name)
        else:
            assert x == y, f.name


@pytest.mark.parametrize("method", ["exact", "randomized"])
def test_pca_coordinates_and_vacf_in_one_pass_equal_the_separate_calls(method):
    """run_pass with {PCA, coordinates, VACF}: the frames are read once, each result equals its separate call
    (the separate analyses are checked against scikit-learn, numpy and analytic results in their own files)."""
    from phasewake.core.analyses.projection import compute_pca

    run0 = _synthetic(n_frames=260, n_atoms=12)
    run, counter = _counting(run0)
    group = [2, 3, 4, 5, 6, 7, 8, 9]  # not all atoms: the pass reads the union with the coordinates' atoms
    settings = {"atom_indices": group, "method": method, "n_components": 4, "block_frames": 64, "oversample": 8}
    fp = FramePass(run)
    fp.add("pca", PCAConsumer(run, **settings)).add("q", CoordinatesConsumer(run, ["distance(0, 1)"]))
    fp.add("v", VACFConsumer(run, max_lag_ps=0.3))
    with chunking(frames=37):  # other chunks than the PCA's blocks: the result must not change
        out = drive(fp.work())
    assert counter.calls == 1 and counter.frames_read == run.n_frames
    sep = drive(compute_pca(run0, projections=False, **settings))
    _pca_equal(out["pca"], sep)
    # the same blocks of frames meet the same BLAS calls: bitwise equal, whatever the pass's chunks
    np.testing.assert_array_equal(out["pca"].eigenvalues, sep.eigenvalues)
    np.testing.assert_array_equal(out["pca"].eigenvectors, sep.eigenvectors)
    with chunking(frames=37):
        _assert_series_equal(out["q"], drive(compute_coordinates(run0, ["distance(0, 1)"])))
    np.testing.assert_allclose(out["v"].vacf, drive(vacf(run0, max_lag_ps=0.3)).vacf, rtol=1e-10)


def test_pca_projection_consumer_in_a_second_pass_equals_compute_pca():
    from phasewake.core.analyses.projection import compute_pca

    run0 = _synthetic(n_frames=200, n_atoms=10)
    run, counter = _counting(run0)
    first = drive(run_pass(run, {"pca": PCAConsumer(run, n_components=3)}))["pca"]
    second = drive(FramePass(run).add("proj", PCAProjectionConsumer(run, first))
                   .add("T", GroupTemperatureConsumer(run, n_com=0)).work())
    assert counter.calls == 2
    sep = drive(compute_pca(run0, n_components=3))  # covariance pass + projection pass
    _pca_equal(second["proj"], sep)
    # the mode momenta of unit-mass (mass-weighted) modes: p_k = e_k . M^1/2 v (definition), checked directly
    v = np.asarray(run0.frames._vel, dtype=np.float64)
    pos = np.asarray(run0.frames._pos, dtype=np.float64)
    from phasewake.core.analyses.coordinates import kabsch

    rot, _, _ = kabsch(pos, pos[0], run0.masses_amu)
    pv = (np.matmul(v, rot) * np.sqrt(run0.masses_amu)[None, :, None]).reshape(len(v), -1) @ sep.eigenvectors
    np.testing.assert_allclose(second["proj"].momenta, pv, rtol=1e-9, atol=1e-9 * np.abs(pv).max())


def test_pca_consumer_refuses_what_one_pass_cannot_do():
    from phasewake.core.errors import AnalysisError

    run = _synthetic(n_frames=30)
    with pytest.raises(AnalysisError, match="n_iter"):
        PCAConsumer(run, method="randomized", n_iter=2)
    with pytest.raises(AnalysisError, match="second pass"):
        PCAConsumer(run, projections=True)
    with pytest.raises(AnalysisError, match="stride"):
        PCAConsumer(run, stride=2)


def test_compute_pca_reads_once_per_pass_and_no_extra_frame():
    from phasewake.core.analyses.projection import compute_pca

    run0 = _synthetic(n_frames=120)
    run, counter = _counting(run0)
    calls = []
    counter.read_frame = lambda i: calls.append(i) or run0.frames.read_frame(i)
    drive(compute_pca(run, n_components=2, projections=False))
    assert counter.calls == 1 and calls == []  # the reference is the first frame of the first chunk
    drive(compute_pca(run, n_components=2, method="randomized", n_iter=2, projections=True))
    assert counter.calls == 1 + 3 + 1
