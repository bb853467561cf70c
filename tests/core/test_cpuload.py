"""Thread choice for the chunked kernels from the runnable-task count (Linux /proc/loadavg format, proc(5))."""

from __future__ import annotations

from pathlib import Path

import pytest

from phasewake.core import cpuload


@pytest.mark.parametrize("line,cores,expected", [
    ("0.10 0.20 0.30 1/120 4242\n", 2, 2),  # only the caller runs: one idle core -> two threads
    ("2.50 2.40 2.30 2/120 4242\n", 2, 1),  # one other task runs: no idle core
    ("3.00 3.00 3.00 5/120 4242\n", 2, 1),
    ("0.00 0.00 0.00 1/10 1\n", 8, 2),  # capped at MAX_THREADS
    ("garbage\n", 2, 1),  # unknown: one thread
])
def test_threads_from_runnable_tasks(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, line: str, cores: int,
                                     expected: int) -> None:
    f = tmp_path / "loadavg"
    f.write_text(line)
    monkeypatch.setattr(cpuload, "available_cores", lambda: cores)
    assert cpuload.kernel_threads(loadavg_path=str(f)) == expected
    assert cpuload.kernel_threads(3, loadavg_path=str(f)) == 3  # an explicit setting wins
    assert cpuload.spare_cores(str(tmp_path / "missing")) == 0
