"""The result cache: keyed by input identity and settings, invalidated on change, atomic."""

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.store.cache import ENTRY_SUFFIX, ResultCache, make_key, take_notices


def _inputs(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    f = data / "run.bin"
    f.write_bytes(os.urandom(200_000))
    return data, f


def test_roundtrip_and_invalidation(tmp_path):
    data, f = _inputs(tmp_path)
    cache = ResultCache(tmp_path / "cache", enabled=True)
    key = make_key([f], "coords", {"spec": "distance(0, 1)"})
    assert cache.get(key) is None
    arr = np.arange(10.0)
    cache.put(key, {"values": arr}, {"unit": "nm"})
    got = cache.get(key)
    assert got is not None and np.array_equal(got.arrays["values"], arr) and got.meta["unit"] == "nm"
    # other settings -> other key
    assert make_key([f], "coords", {"spec": "distance(0, 2)"}) != key
    # the input changes -> its key changes, the old entry is not served for it
    with open(f, "r+b") as fh:
        fh.seek(100)
        fh.write(b"\x00\x01\x02")
    assert make_key([f], "coords", {"spec": "distance(0, 1)"}) != key
    # nothing was written beside the inputs
    assert sorted(p.name for p in data.iterdir()) == ["run.bin"]


def test_corrupt_entry_is_dropped(tmp_path):
    cache = ResultCache(tmp_path / "cache", enabled=True)
    cache.put("a" * 32, {"x": np.arange(4.0)})
    bad = tmp_path / "cache" / ("a" * 32 + ENTRY_SUFFIX)
    data = bytearray(bad.read_bytes())
    data[-8] ^= 0xFF  # inside the stored array
    bad.write_bytes(bytes(data))
    take_notices()
    assert cache.get("a" * 32) is None
    assert not bad.exists()
    assert any("damaged" in n for n in take_notices())


def test_disabled_by_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("PHASEWAKE_NO_CACHE", "1")
    cache = ResultCache(tmp_path / "cache")
    cache.put("b" * 32, {"x": np.zeros(3)})
    assert cache.get("b" * 32) is None


@pytest.mark.slow  # measured 0.9 s of CPU
def test_two_writers_same_key(tmp_path):
    # Two processes write the same entry at once; readers always see a complete file.
    folder = tmp_path / "cache"
    code = textwrap.dedent(
        f"""
        import numpy as np
        from phasewake.core.store.cache import ResultCache
        c = ResultCache({str(folder)!r}, enabled=True)
        for i in range(20):
            c.put({"c" * 32!r}, {{"x": np.full(50_000, float(i))}})
            e = c.get({"c" * 32!r})
            assert e is not None and e.arrays["x"].shape == (50_000,) and len(set(e.arrays["x"].tolist())) == 1
        """
    )
    procs = [subprocess.Popen([sys.executable, "-c", code]) for _ in range(2)]
    assert all(p.wait(timeout=120) == 0 for p in procs)
    assert not list(folder.glob(".*.part"))


def test_prune_by_size(tmp_path):
    cache = ResultCache(tmp_path / "cache", enabled=True, max_bytes=300_000)
    for i in range(5):
        cache.put(f"{i:032x}", {"x": np.zeros(20_000)})  # ~160 kB each
    assert cache.info().size_bytes <= 300_000


def test_cache_command(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(tmp_path / "c"))
    ResultCache(enabled=True).put("d" * 32, {"x": np.zeros(4)})
    assert main(["cache", "--clear"]) == 0
    assert "removed 1" in capsys.readouterr().out
    assert ResultCache().info().entries == 0


def test_the_cache_of_earlier_versions_is_adopted_and_only_its_entries_removed(tmp_path):
    # Earlier versions kept <key>.h5 HDF5 entries and wrote no mark. Such a folder is adopted; its entries
    # go only when they verifiably are ours (root attributes phasewake_version and meta, an arrays group).
    import h5py

    folder = tmp_path / "cache"
    folder.mkdir()
    old = folder / ("1" * 32 + ".h5")
    with h5py.File(old, "w") as f:
        f.create_group("arrays").create_dataset("x", data=np.zeros(3))
        f.attrs["meta"] = "{}"
        f.attrs["phasewake_version"] = "0.1"
    lookalike = folder / ("2" * 32 + ".h5")  # an HDF5 file of the same name pattern, not ours
    with h5py.File(lookalike, "w") as f:
        f.create_dataset("data", data=np.ones(2))
    cache = ResultCache(folder, enabled=True)
    assert cache.owned() is None  # adoptable, not refused
    assert cache.clear() == 1
    assert not old.exists() and lookalike.exists() and (folder / ".phasewake-cache").is_file()
    cache.put("3" * 32, {"x": np.arange(2.0)})
    assert cache.get("3" * 32) is not None and lookalike.exists()
