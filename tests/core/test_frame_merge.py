"""Frame consumers fed parts of the frames and merged in frame order equal the serial pass.

The serial pass (one consumer fed every frame) is itself checked against outside references in the
analyses' own test files; here the check is that splitting the frames changes nothing: counts (frames,
lags, time axes) exactly, sums to the float tolerance stated beside each test. Each part is pickled and
unpickled before the merge, as a worker process would send it back.
"""

import pickle
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses.coordinates import CoordinatesConsumer, compute_coordinates
from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
from phasewake.core.analyses.projection import PCAConsumer, PCAProjectionConsumer, compute_pca
from phasewake.core.analyses.velocity import VACFConsumer, vacf
from phasewake.core.errors import AnalysisError
from phasewake.core.model.feeding import feed
from phasewake.core.model.framepass import run_pass
from phasewake.core.model.run import RunMetadata
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def _synthetic(n_frames=240, n_atoms=10, seed=11):
    rng = np.random.default_rng(seed)
    masses = rng.uniform(1.0, 16.0, n_atoms)
    pos = np.cumsum(rng.normal(0, 0.02, (n_frames, n_atoms, 3)), axis=0) + rng.uniform(0, 2, (1, n_atoms, 3))
    v = np.empty((n_frames, n_atoms, 3))
    v[0] = rng.standard_normal((n_atoms, 3))
    for t in range(1, n_frames):  # AR(1): a VACF with memory
        v[t] = 0.9 * v[t - 1] + np.sqrt(1 - 0.81) * rng.standard_normal((n_atoms, 3))
    return run_from_arrays(pos.astype(np.float32), np.arange(n_frames) * 0.01, masses,
                           velocities_nm_per_ps=v.astype(np.float32), box_nm=np.array([3.0, 3.0, 3.0]),
                           metadata=RunMetadata(n_constraints=0, com_motion_removed=False))


def split_and_merge(run, make, cuts, *, start=0, stop=None, frames=None):
    """Feed ``make()`` consumers frames [start, c0), [c0, c1), ... (in chunks of at most ``frames``
    frames), pickle each, merge in order, finish."""
    stop = run.n_frames if stop is None else stop
    edges = [start, *cuts, stop]
    parts = []
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        c = make()
        with chunking(frames=frames):
            for _ in feed(run, {"c": c}, start=lo, stop=hi):
                pass
        parts.append(pickle.loads(pickle.dumps(c)))
    first = parts[0]
    for later in parts[1:]:
        first.merge(later)
    return first.finish()


def _equal(a, b, *, rtol, atol=0.0, exact=("time_ps",)):
    """Field by field; arrays named in ``exact`` and every non-array field exactly."""
    for f in fields(a):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
            assert x is not None and y is not None, f.name
            if f.name in exact or np.asarray(x).dtype.kind in "iub":
                np.testing.assert_array_equal(x, y, err_msg=f.name)
            else:
                np.testing.assert_allclose(x, y, rtol=rtol, atol=atol, err_msg=f.name)
        elif isinstance(x, tuple) and x and hasattr(x[0], "__dataclass_fields__"):
            for xa, ya in zip(x, y, strict=True):
                _equal(xa, ya, rtol=rtol, atol=atol)
        else:
            assert x == y, f.name


SPECS = ["distance(0, 1)", "angle(0, 1, 2)", "dihedral(2, 3, 4, 5)", "com_distance([0, 1], [6-8])", "rg(3-9)"]


@pytest.mark.parametrize("cuts,chunk", [([1], 7), ([120], 64), ([17, 18, 200], 13), ([239], 256)])
def test_coordinates_merge_equals_the_serial_pass(cuts, chunk):
    # per-frame values: equal to 1e-12 relative (a chunk of another length, e.g. one frame, may round
    # the vectorised products differently in the last bit)
    run = _synthetic()
    with chunking(frames=chunk):
        serial = drive(compute_coordinates(run, SPECS))
    got = split_and_merge(run, lambda: CoordinatesConsumer(run, SPECS), cuts, frames=chunk)
    for a, b in zip(got, serial, strict=True):
        _equal(a, b, rtol=1e-12, atol=1e-15)


def test_coordinates_without_velocities_take_finite_differences_over_the_whole_range():
    # dq/dt by central differences needs the neighbours across the cut: taken in finish, after the merge
    rng = np.random.default_rng(3)
    run = run_from_arrays(rng.uniform(0, 1, (50, 4, 3)), np.arange(50) * 0.002, np.ones(4))
    serial = drive(compute_coordinates(run, ["distance(0, 3)"]))
    got = split_and_merge(run, lambda: CoordinatesConsumer(run, ["distance(0, 3)"]), [25])
    _equal(got[0], serial[0], rtol=1e-12, atol=1e-15)
    assert got[0].velocities_estimated


@pytest.mark.parametrize("name", ["dimer_langevin.h5md", "dimer_nve.h5md"])
def test_coordinates_merge_on_sample_runs_split_inside_a_transition_path(name):
    run = open_run([SAMPLES / name])
    serial = drive(compute_coordinates(run, ["distance(0, 1)"]))
    q = serial[0].values
    # a cut where the distance passes its median, between the two states the run visits
    mid = np.median(q)
    crossing = int(np.flatnonzero(np.diff(np.sign(q - mid)) != 0)[len(q) // 1000 % 3] + 1)
    got = split_and_merge(run, lambda: CoordinatesConsumer(run, ["distance(0, 1)"]), [crossing, crossing + 1])
    _equal(got[0], serial[0], rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("cuts", [[1], [100, 101], [33, 77, 150]])
def test_group_temperatures_merge_equals_the_serial_pass(cuts):
    # per-frame kinetic energies: equal to 1e-12 relative (chunk lengths may round the last bit); the
    # group statistics come from them in finish
    run = _synthetic()
    groups = {"first": np.arange(4), "rest": np.arange(4, 10)}
    with chunking(frames=19):
        serial = drive(run_pass(run, {"T": GroupTemperatureConsumer(run, groups=groups, n_com=0)}))["T"]
    got = split_and_merge(run, lambda: GroupTemperatureConsumer(run, groups=groups, n_com=0), cuts, frames=19)
    _equal(got, serial, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("lag_ps,cuts,chunk", [(0.5, [1], 7), (0.5, [120], 64), (0.3, [10, 11, 12, 200], 9),
                                               (None, [60, 180], 256), (0.05, [239], 5)])
def test_vacf_merge_adds_the_origin_pairs_across_each_cut(lag_ps, cuts, chunk):
    # counts (origins per lag) exact; sums to 1e-6 relative: float32 velocities, products in float32 BLAS
    # in the serial correlator and float64 across the cut (pairs summed in another order)
    run = _synthetic()
    groups = {"a": [0, 2, 4], "b": [5, 6, 7, 8]}
    kw = {"groups": groups, "mass_weighted": True, "max_lag_ps": lag_ps}
    with chunking(frames=chunk):
        serial = drive(vacf(run, **kw))
    got = split_and_merge(run, lambda: VACFConsumer(run, **kw), cuts, frames=chunk)
    assert got.n_frames == serial.n_frames and got.vacf.shape == serial.vacf.shape
    _equal(got, serial, rtol=1e-6, atol=1e-6 * np.abs(serial.vacf_sum).max())


def test_vacf_merge_on_a_sample_run_with_the_fft_engine():
    # more than 256 lags: the FFT engine of BlockCorrelator; tolerance as above
    run = open_run([SAMPLES / "dimer_nve.h5md"])
    lag_ps = 300 * float(np.median(np.diff(run.time_ps)))
    serial = drive(vacf(run, max_lag_ps=lag_ps))
    assert serial.vacf.shape[1] > 256
    n = run.n_frames
    got = split_and_merge(run, lambda: VACFConsumer(run, max_lag_ps=lag_ps), [n // 3, n // 3 + 100, n - 1])
    _equal(got, serial, rtol=1e-6, atol=1e-6 * np.abs(serial.vacf_sum).max())


def test_vacf_parts_outside_the_set_up_range_are_refused():
    run = _synthetic()
    c = VACFConsumer(run, max_lag_ps=0.2, start=10, stop=100)
    with pytest.raises(AnalysisError):
        for _ in feed(run, {"c": c}, start=0, stop=50):
            pass


def _pca_consumer(run, **kw):
    c = PCAConsumer(run, **kw)
    c.use_first_frame_of(run, 0)  # the reference a serial pass from frame 0 takes
    return c


@pytest.mark.parametrize("method", ["exact", "randomized"])
@pytest.mark.parametrize("cuts", [[1], [100, 101], [37, 150, 151]])
def test_pca_merge_equals_the_serial_pass(method, cuts):
    # sums of fitted float32 displacements over other blocks: eigenvalues and projections to 1e-5 relative
    run = _synthetic()
    kw = {"atom_indices": np.arange(10), "n_components": 3, "method": method, "block_frames": 64}
    serial = drive(compute_pca(run, **kw, projections=False))
    got = split_and_merge(run, lambda: _pca_consumer(run, **kw), cuts, frames=23)
    assert got.n_frames == serial.n_frames and (got.start, got.stop) == (serial.start, serial.stop)
    np.testing.assert_allclose(got.eigenvalues, serial.eigenvalues, rtol=1e-5)
    np.testing.assert_allclose(got.mean, serial.mean, rtol=1e-6)
    np.testing.assert_allclose(np.abs(np.sum(got.eigenvectors * serial.eigenvectors, axis=0)), 1.0, atol=1e-4)


def test_pca_parts_without_one_reference_are_refused():
    run = _synthetic()
    a, b = PCAConsumer(run, n_components=2), PCAConsumer(run, n_components=2)
    for c, (lo, hi) in ((a, (0, 100)), (b, (100, 240))):
        for _ in feed(run, {"c": c}, start=lo, stop=hi):
            pass
    with pytest.raises(AnalysisError, match="one reference"):
        a.merge(b)


def test_pca_projection_merge_equals_the_serial_pass():
    # per-frame projections: equal to 1e-12 relative (chunk lengths may round the last bit); cosine
    # contents from them in finish
    run = _synthetic()
    pca = drive(compute_pca(run, atom_indices=np.arange(10), n_components=3, projections=False))
    with chunking(frames=31):
        serial = drive(run_pass(run, {"p": PCAProjectionConsumer(run, pca)}))["p"]
    got = split_and_merge(run, lambda: PCAProjectionConsumer(run, pca), [1, 90, 91], frames=31)
    _equal(got, serial, rtol=1e-12, atol=1e-12)


def test_merging_out_of_order_is_refused():
    run = _synthetic()
    a, b = CoordinatesConsumer(run, ["distance(0, 1)"]), CoordinatesConsumer(run, ["distance(0, 1)"])
    for c, (lo, hi) in ((a, (0, 100)), (b, (120, 240))):
        for _ in feed(run, {"c": c}, start=lo, stop=hi):
            pass
    with pytest.raises(AnalysisError, match="right after"):
        a.merge(b)


def test_framepass_imports_no_analysis():
    """The engine is below the analyses: no import of phasewake.core.analyses in framepass.py (a cycle)."""
    import ast

    import phasewake.core.model.framepass as fp

    tree = ast.parse(Path(fp.__file__).read_text())
    names = [n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.module]
    names += [a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names]
    assert names and not [n for n in names if "analyses" in n]


@pytest.mark.parametrize("cuts,chunk", [([1], 7), ([120], 64), ([50, 51, 190], 9)])
def test_msd_merge_equals_the_serial_pass_across_box_crossings(cuts, chunk):
    # atoms that diffuse far enough to leave the box: each part unwraps from its own first frame, the merge
    # joins them by the minimum-image step across the cut. Counts exact; MSD to 1e-9 relative (float64)
    from phasewake.core.analyses.velocity import MSDConsumer, msd

    rng = np.random.default_rng(5)
    steps = rng.normal(0, 0.15, (240, 6, 3))
    pos = np.mod(np.cumsum(steps, axis=0), 2.0).astype(np.float32)  # wrapped into a 2 nm box
    run = run_from_arrays(pos, np.arange(240) * 0.01, np.ones(6), box_nm=np.array([2.0, 2.0, 2.0]))
    kw = {"groups": {"a": [0, 1, 2], "b": [3, 4]}, "max_lag_ps": 0.6}
    with chunking(frames=chunk):
        serial = drive(msd(run, **kw))
    got = split_and_merge(run, lambda: MSDConsumer(run, **kw), cuts, frames=chunk)
    assert got.n_frames == serial.n_frames
    _equal(got, serial, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("start,cuts,chunk", [(0, [1], 7), (0, [120], 64), (30, [31, 100, 101, 200], 9)])
def test_thirumalai_mountain_merge_equals_the_serial_pass(start, cuts, chunk):
    # the later parts hold their per-atom energies and the first part feeds them to its running averages at
    # the merge: counts and time axis exact, Omega and the fits to 1e-12 relative (cumulative sums over
    # chunks cut elsewhere round the last bits)
    from phasewake.core.analyses.ergodicity import KineticEnergySeries

    run = _synthetic()
    atoms = np.arange(1, 9)
    with chunking(frames=19):
        serial = drive(run_pass(run, {"tm": KineticEnergySeries(run, atoms, start=start)}, start=start))["tm"]
    got = split_and_merge(run, lambda: KineticEnergySeries(run, atoms, start=start), cuts, start=start,
                          frames=chunk)
    assert got._count == serial._count == run.n_frames - start
    kw = {"dt_ps": 0.01, "unit": "kJ/mol", "n_particles": atoms.size}
    a, b = got.finish(**kw), serial.finish(**kw)
    np.testing.assert_array_equal(a.time_ps, b.time_ps)
    for name in ("omega", "ratio", "omega0", "d_per_ps", "late_slope"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-12, err_msg=name)
    assert (a.plateau, a.fit_range_ps, a.n_particles, a.settings) == (b.plateau, b.fit_range_ps, b.n_particles,
                                                                      b.settings)


def test_thirumalai_mountain_part_left_unmerged_is_refused():
    from phasewake.core.analyses.ergodicity import KineticEnergySeries

    run = _synthetic()
    a, b = KineticEnergySeries(run, np.arange(4)), KineticEnergySeries(run, np.arange(4))
    own = KineticEnergySeries(run, np.arange(4), start=100)  # a pass of its own from frame 100
    for c, (lo, hi) in ((a, (0, 100)), (b, (100, 240)), (own, (100, 240))):
        for _ in feed(run, {"c": c}, start=lo, stop=hi):
            pass
    with pytest.raises(AnalysisError, match="not merged"):
        b.finish()
    with pytest.raises(AnalysisError, match="first of the pass"):
        a.merge(own)


def test_thirumalai_mountain_over_two_workers_equals_the_serial_pass():
    # the real worker processes (each part pickled there and back, ranges cut by parallel.cut_ranges) on a
    # sample run with velocities; tolerance as in the merge test above
    from phasewake.core.analyses.ergodicity import KineticEnergySeries
    from phasewake.core.model import parallel

    run = open_run([SAMPLES / "dimer_nve.h5md"])
    atoms = np.arange(run.n_atoms)
    with chunking(frames=128):
        serial = drive(run_pass(run, {"tm": KineticEnergySeries(run, atoms)}, workers=1))["tm"]
        par = drive(parallel.ranges_pass(run, {"tm": KineticEnergySeries(run, atoms)}, workers=2))["tm"]
    kw = {"dt_ps": float(np.median(np.diff(run.time_ps))), "n_particles": atoms.size}
    a, b = par.finish(**kw), serial.finish(**kw)
    assert a.omega.size == b.omega.size == run.n_frames
    np.testing.assert_allclose(a.omega, b.omega, rtol=1e-12)
    assert a.d_per_ps == pytest.approx(b.d_per_ps, rel=1e-12)
