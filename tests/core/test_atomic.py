"""Atomic writes: a writer killed half-way leaves the previous file intact."""

import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from phasewake.core.store.atomic import atomic_open, write_text


def test_replaces_whole_file(tmp_path):
    target = tmp_path / "out.txt"
    write_text(target, "old")
    write_text(target, "new")
    assert target.read_text() == "new"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_exception_keeps_previous(tmp_path):
    target = tmp_path / "out.txt"
    write_text(target, "previous")
    with pytest.raises(RuntimeError), atomic_open(target) as fh:
        fh.write("half")
        raise RuntimeError("boom")
    assert target.read_text() == "previous"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_killed_writer_leaves_previous_intact(tmp_path):
    target = tmp_path / "session.json"
    write_text(target, '{"version": 1}')
    flag = tmp_path / "started"
    code = textwrap.dedent(
        f"""
        import pathlib, time
        from phasewake.core.store.atomic import atomic_open
        with atomic_open({str(target)!r}) as fh:
            fh.write('{{"version": 2, "partial": ')
            fh.flush()
            pathlib.Path({str(flag)!r}).write_text('x')
            time.sleep(60)
            fh.write('true}}')
        """
    )
    proc = subprocess.Popen([sys.executable, "-c", code])
    deadline = time.monotonic() + 30
    while not flag.exists():
        assert time.monotonic() < deadline, "writer did not start"
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert target.read_text() == '{"version": 1}'


def test_new_files_honour_the_umask_and_replacements_keep_their_mode(tmp_path):
    import stat

    old = os.umask(0o027)
    try:
        write_text(tmp_path / "a.txt", "x")
        assert stat.S_IMODE((tmp_path / "a.txt").stat().st_mode) == 0o640
        os.chmod(tmp_path / "a.txt", 0o604)
        write_text(tmp_path / "a.txt", "y")
        assert stat.S_IMODE((tmp_path / "a.txt").stat().st_mode) == 0o604
    finally:
        os.umask(old)


def test_temporary_names_stay_short_and_are_recognised(tmp_path):
    from phasewake.core.store.atomic import is_our_temp, temp_name

    for name in ("a.csv", "x" * 255, "é" * 127, "数" * 85):
        t = temp_name(name)
        assert len(t.encode()) < 100 and is_our_temp(t) and t.startswith(".")
        t.encode("utf-8")  # never half a character
    for other in ("movie.part", ".notes.part", ".a.0123456789ab.part.bak", "a.0123456789ab.part",
                  ".a.0123456789AB.part", ".a.0123456789a.part"):
        assert not is_our_temp(other), other


def test_sweep_removes_only_our_stale_temporaries(tmp_path):
    from phasewake.core.store.atomic import STALE_AFTER_S, sweep_stale, temp_name

    old_ours, new_ours = tmp_path / temp_name("r.csv"), tmp_path / temp_name("r.csv")
    folder_like = tmp_path / temp_name("d")
    others = [tmp_path / "x.part", tmp_path / ".x.part", tmp_path / "report.pdf"]
    for p in (old_ours, new_ours, *others):
        p.write_text("x")
    folder_like.mkdir()
    t = time.time() - 2 * STALE_AFTER_S
    for p in (old_ours, folder_like, *others):
        os.utime(p, (t, t))
    assert sweep_stale(tmp_path) == 1
    assert not old_ours.exists() and new_ours.exists() and folder_like.is_dir()
    assert all(p.exists() for p in others)


def test_write_errors_are_one_typed_error_and_leave_no_litter(tmp_path):
    from phasewake.core.store.atomic import OutputError

    (tmp_path / "folder").mkdir()
    with pytest.raises(OutputError, match="folder of that name"):
        write_text(tmp_path / "folder", "x")
    (tmp_path / "file").write_text("a file")
    with pytest.raises(OutputError, match="is a file, not a folder"):
        write_text(tmp_path / "file" / "out.txt", "x")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["file", "folder"]


def test_hdf5_is_built_in_memory_then_written_once(tmp_path, monkeypatch):
    import h5py
    import numpy as np

    from phasewake.core.store import atomic

    writes = []
    real = atomic.write_bytes
    monkeypatch.setattr(atomic, "write_bytes", lambda p, d: (writes.append(p), real(p, d)))
    with atomic.atomic_hdf5(tmp_path / "x.h5") as f:
        f.create_dataset("v", data=np.arange(5.0))
        assert not (tmp_path / "x.h5").exists() and list(tmp_path.iterdir()) == []  # nothing on disk yet
    assert writes == [tmp_path / "x.h5"]
    with h5py.File(tmp_path / "x.h5", "r") as f:
        assert f["v"][()].tolist() == [0.0, 1.0, 2.0, 3.0, 4.0]
