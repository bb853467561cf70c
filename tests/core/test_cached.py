"""The result cache in use: cached coordinates are served without reading frames, equal the
computed ones, and are invalidated when an input file changes. Every test points the cache at tmp_path.

The coordinate values themselves are checked against outside references in test_coordinates.py; here the
reference is the uncached computation of the same request.
"""

import dataclasses
import os
import shutil
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses.coordinates import compute_coordinates
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.store.cache import ResultCache
from phasewake.core.store.cached import cached_coordinates
from tests.counting import CountingFrames, counted
from tests.helpers import assert_same

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
SPECS = ["distance(0, 1)", "x(0)"]






def _copy(tmp_path, name="dimer_nve.h5md"):
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    dst = data / name
    shutil.copyfile(SAMPLES / name, dst)
    return dst


def _counted(path):
    return counted(open_run([path]))


def _equal(a, b):
    assert len(a) == len(b)
    for sa, sb in zip(a, b, strict=True):
        for f in fields(sa):
            x, y = getattr(sa, f.name), getattr(sb, f.name)
            if isinstance(x, np.ndarray) or isinstance(y, np.ndarray):
                np.testing.assert_array_equal(x, y, err_msg=f.name)
            else:
                assert x == y, f.name


def test_second_call_is_served_from_the_cache(tmp_path, cache_dir):
    path = _copy(tmp_path)
    run, frames = _counted(path)
    first = drive(cached_coordinates(run, SPECS, start=5, stop=150))
    assert frames.calls == 1
    assert len(list(cache_dir.glob("*.pwcache"))) == 1
    run2, frames2 = _counted(path)  # a fresh open, as a second window or command would do
    second = drive(cached_coordinates(run2, SPECS, start=5, stop=150))
    assert frames2.calls == 0
    _equal(second, first)
    _equal(first, drive(compute_coordinates(open_run([path]), SPECS, start=5, stop=150)))
    # another time window is another entry
    drive(cached_coordinates(run2, SPECS, start=0, stop=150))
    assert frames2.calls == 1
    # nothing written beside the input
    assert sorted(p.name for p in path.parent.iterdir()) == [path.name]


def test_touching_or_changing_the_input_invalidates(tmp_path, cache_dir):
    path = _copy(tmp_path)
    run, _ = _counted(path)
    drive(cached_coordinates(run, SPECS))
    st = path.stat()
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns + 5_000_000_000))  # touch: new mtime
    run2, frames2 = _counted(path)
    drive(cached_coordinates(run2, SPECS))
    assert frames2.calls == 1
    # content change (via h5py): the positions of frame 3 move; the cached answer must not be served
    import h5py

    with h5py.File(path, "r+") as f:
        ds = f["particles"][next(iter(f["particles"]))]["position"]["value"]
        ds[3] = ds[3] * 1.01
    run3, frames3 = _counted(path)
    got = drive(cached_coordinates(run3, SPECS))
    assert frames3.calls == 1
    _equal(got, drive(compute_coordinates(open_run([path]), SPECS)))


def test_no_cache_setting_and_disabled_cache(tmp_path, cache_dir, monkeypatch):
    path = _copy(tmp_path)
    run, frames = _counted(path)
    drive(cached_coordinates(run, SPECS, cache=ResultCache(enabled=False)))
    drive(cached_coordinates(run, SPECS, cache=ResultCache(enabled=False)))
    assert frames.calls == 2 and not cache_dir.exists()
    monkeypatch.setenv("PHASEWAKE_NO_CACHE", "1")
    drive(cached_coordinates(run, SPECS))
    drive(cached_coordinates(run, SPECS))
    assert frames.calls == 4 and not cache_dir.exists()


def test_in_memory_runs_are_never_cached(tmp_path, cache_dir):
    rng = np.random.default_rng(1)
    run = run_from_arrays(rng.uniform(0, 1, (20, 3, 3)), np.arange(20) * 0.01, np.ones(3))
    frames = CountingFrames(run.frames)
    run = dataclasses.replace(run, frames=frames)
    drive(cached_coordinates(run, ["distance(0, 2)"]))
    drive(cached_coordinates(run, ["distance(0, 2)"]))
    assert frames.calls == 2 and not cache_dir.exists()


def test_coords_command_uses_the_cache_and_no_cache_bypasses_it(tmp_path, cache_dir, capsys):
    from phasewake.app.cli import main

    path = _copy(tmp_path)
    out1, out2, out3 = tmp_path / "a.csv", tmp_path / "b.csv", tmp_path / "c.csv"
    assert main(["coords", str(path), "-c", "distance(0, 1)", "--momentum", "-o", str(out1)]) == 0
    assert len(list(cache_dir.glob("*.pwcache"))) == 1
    assert main(["coords", str(path), "-c", "distance(0, 1)", "--momentum", "-o", str(out2)]) == 0
    assert out1.read_text() == out2.read_text()
    shutil.rmtree(cache_dir)
    assert main(["coords", str(path), "-c", "distance(0, 1)", "--momentum", "--no-cache", "-o", str(out3)]) == 0
    assert not cache_dir.exists()
    assert out3.read_text() == out1.read_text()


def test_window_coordinate_series_uses_the_result_cache(tmp_path, cache_dir):
    from phasewake.app.window import analyses

    path = _copy(tmp_path)
    run, frames = _counted(path)
    first = drive(analyses.coordinate_series(run, "distance(0, 1)", 0, 100))
    run2, frames2 = _counted(path)  # the run reopened (a new window): the in-memory cache misses
    second = drive(analyses.coordinate_series(run2, "distance(0, 1)", 0, 100))
    assert frames.calls == 1 and frames2.calls == 0
    _equal([second], [first])


# ---- cached_work: any analysis ("looking at the same run again is instant") ---------------


def _entries(cache_dir):
    return sorted(cache_dir.glob("*.pwcache")) if cache_dir.exists() else []


@pytest.mark.slow  # measured 0.5 s of CPU
def test_audit_second_call_reads_no_frames_and_equals_the_computation(tmp_path, cache_dir):
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.store.cached import cached_audit

    path = _copy(tmp_path)
    run, frames = _counted(path)
    first = drive(cached_audit(run))
    assert frames.calls >= 1 and len(_entries(cache_dir)) == 1
    run2, frames2 = _counted(path)
    messages = []
    second = drive(cached_audit(run2), messages.append)
    assert frames2.calls == 0
    assert [m.message for m in messages] == ["audit (from the cache)"]
    assert_same(second, first)
    assert_same(second, drive(audit_run(open_run([path]))))  # the uncached computation of the same request
    # a changed setting is another entry (and reads frames again)
    drive(cached_audit(run2, timestep_ps=0.002))
    drive(cached_audit(run2, groups={"dimer": [0, 1]}))
    assert frames2.calls >= 2 and len(_entries(cache_dir)) == 3
    # a changed run override (the window's Runs list or --timestep on open) is another entry too
    run3, frames3 = _counted(path)
    run3.metadata.timestep_ps = 0.003  # the file says 0.004
    drive(cached_audit(run3))
    assert frames3.calls >= 1 and len(_entries(cache_dir)) == 4


def test_touching_the_input_invalidates_an_analysis(tmp_path, cache_dir):
    from phasewake.core.store.cached import cached_vacf

    path = _copy(tmp_path)
    run, _ = _counted(path)
    drive(cached_vacf(run))
    st = path.stat()
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns + 5_000_000_000))
    run2, frames2 = _counted(path)
    drive(cached_vacf(run2))
    assert frames2.calls == 1 and len(_entries(cache_dir)) == 2


def test_pca_settings_that_change_the_result_change_the_key(tmp_path, cache_dir):
    from phasewake.core.store.cached import cached_pca

    path = _copy(tmp_path)
    run, frames = _counted(path)
    base = {"atom_indices": np.arange(6), "n_components": 3, "stop": 120}
    drive(cached_pca(run, **base))
    n = frames.calls
    drive(cached_pca(run, **base))
    assert frames.calls == n  # same settings: a hit
    variants = [{"n_components": 2}, {"stop": 100}, {"start": 5}, {"mass_weighted": False}, {"fit": False},
                {"atom_indices": np.arange(1, 7)}, {"method": "randomized", "n_iter": 2},
                {"method": "randomized", "n_iter": 2, "seed": 1}]
    for k, change in enumerate(variants):
        drive(cached_pca(run, **{**base, **change}))
        assert frames.calls > n, change
        n = frames.calls
        assert len(_entries(cache_dir)) == k + 2


def test_window_runs_key_on_their_frame_range(tmp_path, cache_dir):
    from phasewake.app.window.analyses import window_run
    from phasewake.core.store.cached import cached_spectrum

    path = _copy(tmp_path)
    run, frames = _counted(path)
    a = drive(cached_spectrum(window_run(run, 0, 150), max_lag_ps=0.5))
    b = drive(cached_spectrum(window_run(run, 50, 200), max_lag_ps=0.5))
    assert frames.calls == 2 and len(_entries(cache_dir)) == 2
    assert not np.array_equal(a.intensity, b.intensity)  # really another window
    run2, frames2 = _counted(path)
    again = drive(cached_spectrum(window_run(run2, 50, 200), max_lag_ps=0.5))
    assert frames2.calls == 0
    assert_same(again, b)


@pytest.mark.slow  # measured 0.5 s of CPU
def test_compare_run_joins_the_key_and_in_memory_settings_are_not_cached(tmp_path, cache_dir):
    from phasewake.core.store.cached import cached_audit

    path = _copy(tmp_path)
    big = _copy(tmp_path, "dimer_nve_bigstep.h5md")
    run, frames = _counted(path)
    drive(cached_audit(run, compare=open_run([big])))
    drive(cached_audit(run, compare=open_run([big])))
    assert len(_entries(cache_dir)) == 1
    other = _copy(tmp_path, "dimer_langevin.h5md")
    drive(cached_audit(run, compare=open_run([other])))  # another compare run: another entry
    assert len(_entries(cache_dir)) == 2
    n = frames.calls
    memory = dataclasses.replace(open_run([big]), paths=())  # a compare run without files: no stable key
    drive(cached_audit(run, compare=memory))  # computed, not cached
    assert frames.calls > n and len(_entries(cache_dir)) == 2


def test_unwritable_cache_still_returns_the_result(tmp_path, cache_dir):
    from phasewake.core.store.cached import cached_work

    path = _copy(tmp_path)
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("x")
    cache = ResultCache(blocker / "cache", enabled=True)  # mkdir fails: a file is in the way

    def work():
        yield Progress(0, 1, "x")
        return np.arange(3.0)

    from phasewake.core.progress import Progress
    from phasewake.core.store.cache import take_notices

    take_notices()
    got = drive(cached_work(open_run([path]), "test", {}, work(), cache=cache))
    np.testing.assert_array_equal(got, np.arange(3.0))
    (notice,) = take_notices()  # one line for the front end to show
    assert notice.startswith("cache skipped") and str(blocker) in notice
    # a read-only folder (effective for non-root users): a hit is still served, a miss still computed
    ro = tmp_path / "ro"
    ok_cache = ResultCache(ro, enabled=True)
    drive(cached_work(open_run([path]), "test", {}, work(), cache=ok_cache))
    ro.chmod(0o555)
    try:
        np.testing.assert_array_equal(drive(cached_work(open_run([path]), "test", {}, work(), cache=ok_cache)),
                                      np.arange(3.0))
        np.testing.assert_array_equal(drive(cached_work(open_run([path]), "test", {"k": 1}, work(),
                                                        cache=ok_cache)), np.arange(3.0))
    finally:
        ro.chmod(0o755)


def test_a_result_the_codec_cannot_store_is_simply_not_cached(tmp_path, cache_dir):
    from phasewake.core.progress import Progress
    from phasewake.core.store.cached import cached_work

    path = _copy(tmp_path)
    marker = object()

    def work():
        yield Progress(0, 1, "x")
        return {"thing": marker}

    assert drive(cached_work(open_run([path]), "odd", {}, work()))["thing"] is marker
    assert _entries(cache_dir) == []


@pytest.mark.slow
def test_two_processes_caching_the_same_analysis_leave_a_readable_entry(tmp_path, cache_dir):
    import subprocess
    import sys
    import textwrap

    path = _copy(tmp_path)
    code = textwrap.dedent(
        f"""
        import numpy as np
        from phasewake.core.store.cache import ResultCache
        from phasewake.core.store.cached import cached_work
        from phasewake.core.progress import drive, Progress
        from phasewake.core.readers import open_run
        from phasewake.core.analyses.verdicts import Threshold
        cache = ResultCache({str(cache_dir)!r}, enabled=True)
        run = open_run([{str(path)!r}])
        def work():
            yield Progress(0, 1, "x")
            return (np.full(40_000, 2.5), Threshold(kind="k", caution=1.0, problem=float("nan"), unit="K",
                                                    source="s"))
        for i in range(12):
            cache.clear() if i % 4 == 3 else None
            arr, thr = drive(cached_work(run, "race", {{}}, work(), cache=cache))
            assert arr.shape == (40_000,) and (arr == 2.5).all() and thr.kind == "k" and thr.problem != thr.problem
        """
    )
    procs = [subprocess.Popen([sys.executable, "-c", code]) for _ in range(2)]
    assert all(p.wait(timeout=120) == 0 for p in procs)
    assert not list(cache_dir.glob(".*.part"))


def test_a_hit_is_served_when_the_entry_cannot_be_touched(tmp_path, cache_dir, monkeypatch):
    # A read-only cache (shared, or on a read-only file system): marking the entry as recently used fails,
    # the entry is still served. Simulated by making os.utime fail (root ignores folder permissions).
    from phasewake.core.store import cache as cache_mod
    from phasewake.core.store.cached import cached_vacf

    path = _copy(tmp_path)
    run, _ = _counted(path)
    first = drive(cached_vacf(run))

    def refuse(*a, **k):
        raise PermissionError(13, "read-only file system")

    monkeypatch.setattr(cache_mod.os, "utime", refuse)
    run2, frames2 = _counted(path)
    assert_same(drive(cached_vacf(run2)), first)
    assert frames2.calls == 0


def test_a_hit_never_starts_the_analysis(tmp_path, cache_dir):
    from phasewake.core.progress import Progress
    from phasewake.core.store.cached import cached_work

    path = _copy(tmp_path)
    started = []

    def work():
        started.append(1)
        yield Progress(0, 2, "half")
        yield Progress(1, 2, "done")
        return {"values": np.array([1.0, np.nan]), "n": 3}

    seen = []
    first = drive(cached_work(open_run([path]), "toy", {"a": 1}, work()), seen.append)
    assert started == [1] and [p.message for p in seen] == ["half", "done"]
    seen.clear()
    second = drive(cached_work(open_run([path]), "toy", {"a": 1}, work()), seen.append)
    assert started == [1] and [p.message for p in seen] == ["toy (from the cache)"]
    assert_same(second, first)
    # the same settings under another analysis name are another entry
    drive(cached_work(open_run([path]), "toy2", {"a": 1}, work()))
    assert started == [1, 1]


def test_requested_pass_reads_the_frames_once_and_shares_entries_with_the_single_analyses(tmp_path, cache_dir):
    """Audit + coordinate + PCA from one read (and the PCA's projection pass): results equal to the separate
    analyses (the reference: audit_run, compute_coordinates and compute_pca on their own), and the entries it
    writes are the ones cached_audit / cached_coordinates / cached_pca look up."""
    from phasewake.core.analyses.audit import AuditRequest, audit_run
    from phasewake.core.analyses.coordinates import CoordinatesRequest
    from phasewake.core.analyses.projection import PCARequest, compute_pca
    from phasewake.core.store.cached import cached_audit, cached_pca, requested_pass

    path = _copy(tmp_path)
    pca_kw = {"atom_indices": np.arange(2, 12), "n_components": 3, "method": "exact"}
    run, frames = _counted(path)
    items = {"audit": AuditRequest(n_constraints=0), "q": CoordinatesRequest(SPECS),
             "pca": PCARequest(**pca_kw)}
    got = drive(requested_pass(run, items))
    assert frames.calls == 2  # one shared pass, then the PCA's projections
    assert len(_entries(cache_dir)) == 3
    plain = open_run([path])
    assert_same(got["audit"], drive(audit_run(plain, n_constraints=0)))
    _equal(got["q"], drive(compute_coordinates(plain, SPECS)))
    alone = drive(compute_pca(plain, **pca_kw))
    np.testing.assert_allclose(got["pca"].eigenvalues, alone.eigenvalues, rtol=1e-9)
    np.testing.assert_allclose(np.abs(got["pca"].projections), np.abs(alone.projections), rtol=1e-6, atol=1e-9)
    # the single analyses hit what the pass stored
    run2, frames2 = _counted(path)
    drive(cached_audit(run2, n_constraints=0))
    drive(cached_coordinates(run2, SPECS))
    drive(cached_pca(run2, **pca_kw))
    assert frames2.calls == 0
    # and the pass itself is served from the cache the second time
    again = drive(requested_pass(run2, {"audit": AuditRequest(n_constraints=0), "q": CoordinatesRequest(SPECS)}))
    assert frames2.calls == 0
    assert_same(again["audit"], got["audit"])
    # only filling the cache (the window's shared read): entries already there are not even read
    filled = drive(requested_pass(run2, {"audit": AuditRequest(n_constraints=0), "q": CoordinatesRequest(SPECS)},
                               load_hits=False))
    assert frames2.calls == 0 and filled == {"audit": None, "q": None}


def test_requested_pass_runs_what_cannot_share_a_pass_alone_and_keeps_errors_apart(tmp_path, cache_dir):
    from dataclasses import dataclass
    from typing import ClassVar

    from phasewake.core.analyses.coordinates import CoordinatesRequest
    from phasewake.core.analyses.projection import PCARequest
    from phasewake.core.analyses.request import AnalysisRequest
    from phasewake.core.errors import AnalysisError, CoordinateSpecError
    from phasewake.core.store.cached import requested_pass

    class FailsMidway:  # an analysis that gives up on its second chunk
        atoms = None
        needs_positions = True
        needs_velocities = False

        def __init__(self):
            self.seen = 0

        def prepare(self, columns, *, start, stop, chunk_frames):
            pass

        def update(self, chunk):
            self.seen += 1
            if self.seen == 2:
                raise AnalysisError("gave up")

        def finish(self):
            return "never"

    @dataclass(frozen=True)
    class Failing(AnalysisRequest):
        name: ClassVar[str] = "failing"
        x: int = 1

        def consumer(self, run):
            return FailsMidway()

    path = _copy(tmp_path)
    run, frames = _counted(path)
    items = {"q": CoordinatesRequest(SPECS),
             # subspace iteration needs several passes: its consumer refuses, the caller runs it alone
             "pca": PCARequest(atom_indices=np.arange(2, 12), n_components=2, method="randomized", n_iter=2),
             "bad": Failing()}
    got = drive(requested_pass(run, items, cache=ResultCache(enabled=False)))
    assert frames.calls == 1
    assert got["pca"] is None
    assert isinstance(got["bad"], AnalysisError) and "gave up" in str(got["bad"])
    _equal(got["q"], drive(compute_coordinates(open_run([path]), SPECS)))
    with pytest.raises(CoordinateSpecError):  # a bad specification is refused before the pass starts
        drive(requested_pass(run, {"q": CoordinatesRequest([f"distance(0, {run.n_atoms + 5})"])},
                             cache=ResultCache(enabled=False)))


def test_requested_pass_of_velocity_requests_reads_once_and_each_single_request_hits(tmp_path, cache_dir):
    """VACF and spectrum of every frame from one read; each equals its own analysis (the reference: vacf and
    vibrational_spectrum alone) and is stored under its request's key; a request of part of the frames
    cannot join and runs alone with ``alone=True``."""
    from phasewake.core.analyses.velocity import SpectrumRequest, VACFRequest, vacf, vibrational_spectrum
    from phasewake.core.store.cached import requested, requested_pass

    path = _copy(tmp_path)
    run, frames = _counted(path)
    reqs = {"v": VACFRequest(max_lag_ps=0.5), "s": SpectrumRequest(),
            "part": VACFRequest(max_lag_ps=0.5, stop=100)}
    got = drive(requested_pass(run, reqs, alone=True))
    assert frames.calls == 2  # the shared pass, then the part alone
    plain = open_run([path])
    np.testing.assert_allclose(got["v"].vacf, drive(vacf(plain, max_lag_ps=0.5)).vacf, rtol=1e-10)
    np.testing.assert_allclose(got["part"].vacf, drive(vacf(plain, max_lag_ps=0.5, stop=100)).vacf, rtol=1e-10)
    alone = drive(vibrational_spectrum(plain))
    np.testing.assert_allclose(got["s"].intensity, alone.intensity, rtol=1e-9, atol=1e-12 * np.abs(alone.intensity).max())
    run2, frames2 = _counted(path)
    for request in reqs.values():
        drive(requested(run2, request))
    assert frames2.calls == 0
    without = drive(requested_pass(run2, {"part": VACFRequest(max_lag_ps=0.3, stop=100)}))
    assert without == {"part": None} and frames2.calls == 0  # cannot join, not asked to run alone
