"""Atomic writes: a writer killed half-way leaves the previous file intact (issue 10)."""

import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from phasewake.core.atomic import atomic_open, write_text


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
        from phasewake.core.atomic import atomic_open
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
