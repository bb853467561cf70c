"""The window's panel jobs through the result cache: the same file reopened (a new Run object,
as a new window or a reopened file makes) draws every panel again without reading a frame, and shows the
same numbers. No Qt needed: the jobs are plain generators (app/window/analyses.py).

The reference is the first (computed) showing of each panel; the analyses' numbers are checked against
outside references in the core tests.
"""

import dataclasses
import shutil
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.window import analyses
from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from tests.counting import CountingFrames

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"






def _context(path, start, stop, coordinate="distance(0, 1)"):
    run = open_run([path])
    frames = CountingFrames(run.frames)
    run = dataclasses.replace(run, frames=frames)
    t = run.time_ps
    return analyses.AnalysisContext(run=run, start=start, stop=stop, window_ps=(float(t[start]), float(t[stop - 1])),
                                    coordinate=coordinate), frames


def _numbers(result):
    """What a panel shows, as comparable numbers: verdict levels and values, figure keys, message."""
    return ([(v.kind, v.level, v.measured) for v in result.verdicts], [f.key for f in result.figures],
            result.message, len(result.events))


# each panel's requests (the Correlation and Sampling requests read their coordinate themselves)
CACHED = {"Energy": {"audit"}, "Correlation": {"correlation", "vacf", "spectrum"},
          "Sampling": {"sampling"}, "Crossings": {"coordinates", "crossings"}, "pca": {"pca"}}


@pytest.mark.parametrize("job", sorted(CACHED))
def test_panel_shown_again_reads_no_frames(tmp_path, cache_dir, job):
    from phasewake.core.store.cache import ResultCache

    name = "dimer_langevin.h5md" if job == "Crossings" else "dimer_nve.h5md"
    data = tmp_path / "data"
    data.mkdir()
    path = data / name
    shutil.copyfile(SAMPLES / name, path)
    fn = analyses.EXTRA_JOBS[job][1] if job in analyses.EXTRA_JOBS else analyses.PANEL_JOBS[job]
    ctx, frames = _context(path, 10, 190)
    first = drive(fn(ctx))
    assert frames.calls >= 1, "the first showing computes"
    stored = ResultCache().entries_by_analysis()
    assert set(stored) == CACHED[job], stored
    ctx2, frames2 = _context(path, 10, 190)
    second = drive(fn(ctx2))
    assert frames2.calls == 0
    assert ResultCache().entries_by_analysis() == stored  # every part was a hit: nothing new written
    assert _numbers(second) == _numbers(first)
    for key in ("audit", "pca", "crossings"):
        if key in first.info:
            a, b = first.info[key], second.info[key]
            assert type(a) is type(b)
            for f in dataclasses.fields(a):
                x, y = getattr(a, f.name), getattr(b, f.name)
                if isinstance(x, np.ndarray) and x.dtype.names is None:
                    assert np.array_equal(x, y, equal_nan=x.dtype.kind == "f"), f.name
    # another time window is computed afresh
    ctx3, frames3 = _context(path, 0, 150)
    drive(fn(ctx3))
    assert frames3.calls >= 1


def test_no_cache_environment_turns_the_window_cache_off(tmp_path, cache_dir, monkeypatch):
    monkeypatch.setenv("PHASEWAKE_NO_CACHE", "1")
    path = tmp_path / "dimer_nve.h5md"
    shutil.copyfile(SAMPLES / "dimer_nve.h5md", path)
    ctx, frames = _context(path, 0, 200)
    drive(analyses.PANEL_JOBS["Energy"](ctx))
    ctx2, frames2 = _context(path, 0, 200)
    drive(analyses.PANEL_JOBS["Energy"](ctx2))
    assert frames.calls >= 1 and frames2.calls >= 1 and not cache_dir.exists()


def test_energy_panel_of_a_run_with_a_stated_time_step_finds_the_audit_commands_entry(tmp_path, cache_dir, capsys):
    # What a user states when opening (here the time step) reaches the audit request as on the command line
    # (readers.stated.stated_settings), so the window's Energy panel is the command's audit: same cache key,
    # no frame read, same verdicts.
    import json

    from phasewake.app.cli import main
    from phasewake.app.window.model import RunSettings
    from phasewake.core.store.cache import ResultCache

    path = tmp_path / "dimer_nve.h5md"
    shutil.copyfile(SAMPLES / "dimer_nve.h5md", path)
    assert main(["audit", str(path), "--timestep", "2", "--json"]) in (0, 1)
    printed = json.loads(capsys.readouterr().out)
    run = open_run([path], **RunSettings(timestep_fs=2.0).overrides())
    frames = CountingFrames(run.frames)
    run = dataclasses.replace(run, frames=frames)
    t = run.time_ps
    ctx = analyses.AnalysisContext(run=run, start=0, stop=run.n_frames, window_ps=(float(t[0]), float(t[-1])),
                                   coordinate="distance(0, 1)")
    shown = drive(analyses.PANEL_JOBS["Energy"](ctx))
    assert frames.calls == 0, "the window computed its own audit instead of finding the command's"
    assert ResultCache().entries_by_analysis() == {"audit": 1}
    assert [v.kind for v in shown.info["audit"].verdicts] == [v["kind"] for v in printed["verdicts"]]
