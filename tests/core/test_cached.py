"""The result cache in use (issue 9): cached coordinates are served without reading frames, equal the
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

from phasewake.core.cache import ResultCache
from phasewake.core.cached import cached_coordinates
from phasewake.core.coordinates import compute_coordinates
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.memory import run_from_arrays

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
SPECS = ["distance(0, 1)", "x(0)"]


class CountingFrames:
    def __init__(self, base):
        self.base = base
        self.calls = 0
        for k in ("n_frames", "n_atoms", "has_velocities", "velocities_estimated", "has_box"):
            setattr(self, k, getattr(base, k))

    def iter_chunks(self, **kw):
        self.calls += 1
        yield from self.base.iter_chunks(**kw)

    def read_frame(self, index):
        return self.base.read_frame(index)


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    d = tmp_path / "cache"
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(d))
    monkeypatch.delenv("PHASEWAKE_NO_CACHE", raising=False)
    return d


def _copy(tmp_path, name="dimer_nve.h5md"):
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    dst = data / name
    shutil.copyfile(SAMPLES / name, dst)
    return dst


def _counted(path):
    run = open_run([path])
    frames = CountingFrames(run.frames)
    return dataclasses.replace(run, frames=frames), frames


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
    assert len(list(cache_dir.glob("*.h5"))) == 1
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
    assert len(list(cache_dir.glob("*.h5"))) == 1
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
