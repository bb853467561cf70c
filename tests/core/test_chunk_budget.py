"""The chunk memory budget (peak memory bounded by a configurable chunk size).

Readers cut the frames per chunk so that one chunk's per-atom arrays fit in ``chunk_budget_mb``; every
analysis must give the same numbers whatever the chunking. The references here are plain arithmetic
(bytes = frames x atoms x 3 x 4 per float32 array) and whole-array numpy computations.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from phasewake.core import settings
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.readers.h5md import write_h5md
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import budget_chunk_frames, chunk_budget_mb, set_chunk_budget_mb

SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"


@pytest.fixture(autouse=True)
def _reset_budget(monkeypatch):
    monkeypatch.delenv(settings.CHUNK_BUDGET_ENV, raising=False)
    set_chunk_budget_mb(None)
    yield
    set_chunk_budget_mb(None)


def test_budget_arithmetic_and_sources(monkeypatch):
    assert chunk_budget_mb() == settings.DEFAULT_CHUNK_MB
    monkeypatch.setenv(settings.CHUNK_BUDGET_ENV, "12")
    assert chunk_budget_mb() == 12.0
    # 12 MB / (1000 atoms x 3 x 4 bytes x 2 arrays = 24,000 B per frame) = 500 frames
    assert budget_chunk_frames(10_000, 1000, n_arrays=2) == 500
    assert budget_chunk_frames(100, 1000, n_arrays=2) == 100  # never more than asked
    assert budget_chunk_frames(256, 10**9, n_arrays=2) == 1  # never fewer than one frame
    monkeypatch.setenv(settings.CHUNK_BUDGET_ENV, "not a number")
    assert chunk_budget_mb() == settings.DEFAULT_CHUNK_MB  # a bad value falls back to the default
    set_chunk_budget_mb(0.5)  # the command line's --chunk-mb wins over the environment
    assert chunk_budget_mb() == 0.5
    with pytest.raises(ValueError):
        set_chunk_budget_mb(0.0)


def _chunk_lengths(run, **kw) -> list[int]:
    return [c.positions_nm.shape[0] for c in run.frames.iter_chunks(chunk_frames=256, **kw)]


def test_h5md_and_memory_readers_honour_the_budget(tmp_path):
    rng = np.random.default_rng(3)
    n_frames, n_atoms = 300, 500
    pos = rng.normal(size=(n_frames, n_atoms, 3)).astype(np.float32)
    vel = rng.normal(size=(n_frames, n_atoms, 3)).astype(np.float32)
    t = np.arange(n_frames) * 0.01
    mem = run_from_arrays(pos, t, np.ones(n_atoms), velocities_nm_per_ps=vel)
    path = tmp_path / "r.h5md"
    write_h5md(path, positions_nm=pos, time_ps=t, masses_amu=np.ones(n_atoms),
                      velocities_nm_per_ps=vel)
    disk = open_run([path])
    assert _chunk_lengths(disk) == [256, 44]  # default budget: 128 MB is far more than 256 x 12 kB
    set_chunk_budget_mb(0.6)  # 0.6e6 B / (500 x 12 B x 2 arrays) = 50 frames
    for r in (mem, disk):
        lengths = _chunk_lengths(r)
        assert lengths == [50] * 6, lengths
        # positions only: one array, twice the frames
        assert _chunk_lengths(r, velocities=False) == [100] * 3
        # fewer atoms selected: more frames per chunk, still within the budget
        assert _chunk_lengths(r, atom_indices=np.arange(100)) == [250, 50]
        got = np.concatenate([c.velocities_nm_per_ps for c in r.frames.iter_chunks(chunk_frames=256)])
        np.testing.assert_array_equal(got, vel)


def test_analyses_do_not_depend_on_the_chunking():
    """Coordinates with momenta, the kinetic temperature from the velocities and the VACF of the sample run
    with 7-frame chunks equal those with the default chunks (the reference: the same analyses, default chunks)."""
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.analyses.group_kinetics import GroupTemperatureConsumer
    from phasewake.core.analyses.velocity import vacf
    from phasewake.core.model.framepass import run_pass

    def compute():
        r = open_run([SAMPLE])
        q = drive(compute_coordinates(r, ["distance(0, 1)"]))[0]
        k = drive(run_pass(r, {"T": GroupTemperatureConsumer(r, n_com=0, n_constraints=0)}))["T"]
        v = drive(vacf(r, max_lag_ps=0.2))
        return q, k, v

    q0, k0, v0 = compute()
    n_atoms = open_run([SAMPLE]).n_atoms
    set_chunk_budget_mb(n_atoms * 12 * 2 * 7 / 1e6)  # 7 frames per chunk with positions and velocities
    assert _chunk_lengths(open_run([SAMPLE]))[0] == 7
    q1, k1, v1 = compute()
    np.testing.assert_array_equal(q1.values, q0.values)
    np.testing.assert_allclose(q1.momentum, q0.momentum, rtol=1e-12)
    np.testing.assert_allclose(k1.temperature_K, k0.temperature_K, rtol=1e-12)
    np.testing.assert_allclose(v1.vacf, v0.vacf, rtol=1e-9, atol=1e-15)


@pytest.mark.slow  # measured 1.5 s of CPU
def test_command_line_chunk_option(tmp_path):
    bad = subprocess.run([sys.executable, "-m", "phasewake.app.cli", "describe", str(SAMPLE), "--chunk-mb", "0"],
                         capture_output=True, text=True)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr and "--chunk-mb" in bad.stderr
    ok = subprocess.run([sys.executable, "-m", "phasewake.app.cli", "coords", str(SAMPLE), "-c", "distance(0, 1)",
                         "--chunk-mb", "0.5", "--no-cache", "--json"], capture_output=True, text=True)
    assert ok.returncode == 0, ok.stderr


def test_chunking_setting_sets_every_pass_and_comes_back():
    """``chunking(frames=)`` sets the most frames per chunk of a pass driven inside the block (chunk starts
    0, 7, 14, ...: plain arithmetic), the memory budget may still cut it, and both settings come back on
    leaving the block, also when a value is refused."""
    from phasewake.core.model.framepass import run_pass
    from tests.parallel_consumers import FrameSums

    run = run_from_arrays(np.zeros((50, 4, 3), np.float32), np.arange(50) * 0.1, np.ones(4))
    with settings.chunking(frames=7):
        assert settings.chunk_frames() == 7
        got = drive(run_pass(run, {"s": FrameSums()}))["s"]
    assert got["first_frames"] == list(range(0, 50, 7)) and got["count"] == 50
    assert settings.chunk_frames() == settings.DEFAULT_CHUNK_FRAMES
    with settings.chunking(frames=20, mb=4 * 3 * 4 * 3 / 1e6):  # 3 frames of one float32 array of 4 atoms
        assert chunk_budget_mb() == pytest.approx(1.44e-4)
        got = drive(run_pass(run, {"s": FrameSums(atoms=(0, 1, 2, 3))}))["s"]
    assert max(np.diff([*got["first_frames"], 50])) <= 3 and got["count"] == 50
    assert chunk_budget_mb() == settings.DEFAULT_CHUNK_MB and settings.chunk_frames() == 256
    with pytest.raises(ValueError), settings.chunking(frames=0):
        pass
    with pytest.raises(ValueError), settings.chunking(frames=3, mb=-1.0):
        pass
    assert settings.chunk_frames() == 256 and chunk_budget_mb() == settings.DEFAULT_CHUNK_MB
