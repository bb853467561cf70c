"""The command line, the window's Crossings panel, the report and the Python API build the same
CrossingsRequest for the sample run dimer_langevin.h5md and get equal results: barrier heights, rates,
counts, temperature.

Each front end computes afresh (its own cache folder), so equal numbers come from equal requests, not from
one reading the other's entry; a shared cache then holds a single crossings entry for all four (one key).
The numbers themselves are checked against outside references in tests/core/test_crossings*.py.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from phasewake.app.cli import main
from phasewake.core.progress import drive
from phasewake.core.readers import open_run

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
COORD = "distance(0, 1)"


def _numbers(res) -> dict:
    s = res.suggestion
    return {
        "states": (res.settings.a_hi, res.settings.b_lo, res.settings.surface),
        "barrier_kT": (s.barrier_from_a_kT, s.barrier_from_b_kT),
        "temperature_K": res.settings.temperature_K, "jacobian": res.settings.jacobian,
        "counts": (res.n_transitions, res.n_recrossings, int(res.events.shape[0])),
        "rates_per_ps": (res.rate_ab.rate_per_ps, res.rate_ba.rate_per_ps),
        "kappa": (res.kappa.counting, res.kappa.plateau),
        "tst": None if res.tst is None else (res.tst.kappa_up, res.tst.kappa_down),
    }


def _command_line(path: Path, capsys) -> dict:
    """`phasewake crossings` computes and stores; the request's entry (read back through the request's own
    key) is the command line's result, equal to what it printed."""
    from phasewake.core.analyses.crossings import CrossingsRequest
    from phasewake.core.store.cached import requested

    main(["crossings", str(path), "-c", COORD, "--json"])
    out = json.loads(capsys.readouterr().out)
    messages = []
    res = drive(requested(open_run([path]), CrossingsRequest(coordinate=COORD)), lambda p: messages.append(p.message))
    assert any("from the cache" in m for m in messages)
    assert res.n_transitions == out["n_transitions"] and res.rate_ab.rate_per_ps == out["rate_ab"]["rate_per_ps"]
    return _numbers(res)


def _window(path: Path) -> dict:
    from phasewake.app.window import analyses

    run = open_run([path])
    t = run.time_ps
    ctx = analyses.AnalysisContext(run=run, start=0, stop=run.n_frames, window_ps=(float(t[0]), float(t[-1])),
                                   coordinate=COORD)
    return _numbers(drive(analyses.crossings_job(ctx)).info["crossings"])


def _report(path: Path) -> dict:
    from phasewake.core.figures.report_analyses import ReportSettings, crossings_step
    from phasewake.core.store.cached import cached_coordinates

    run = open_run([path])
    series = drive(cached_coordinates(run, [COORD]))[0]
    res, why = drive(crossings_step(run, COORD, series, ReportSettings(coordinate=COORD), None))
    assert res is not None, why
    return _numbers(res)


def _python_api(path: Path) -> dict:
    import phasewake as pw

    return _numbers(pw.crossings(pw.open(path), COORD))


def test_four_front_ends_build_one_request_and_agree(tmp_path, monkeypatch, capsys):
    from phasewake.core.store.cache import ResultCache

    path = tmp_path / "dimer_langevin.h5md"
    shutil.copyfile(SAMPLES / "dimer_langevin.h5md", path)
    monkeypatch.delenv("PHASEWAKE_NO_CACHE", raising=False)
    found = {}
    for name, front in (("command line", lambda: _command_line(path, capsys)), ("window", lambda: _window(path)),
                        ("report", lambda: _report(path)), ("python api", lambda: _python_api(path))):
        monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(tmp_path / f"cache-{len(found)}"))
        found[name] = front()
    assert found["window"] == found["command line"]
    assert found["report"] == found["command line"]
    assert found["python api"] == found["command line"]
    cli = found["command line"]
    assert cli["temperature_K"] == 120.0 and cli["jacobian"] == "none"  # the file's thermostat target
    assert cli["counts"][0] > 0 and cli["barrier_kT"][0] > 1.0
    # one key: in one shared cache the four leave a single crossings entry
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(tmp_path / "shared"))
    _command_line(path, capsys)
    _window(path)
    _report(path)
    _python_api(path)
    assert ResultCache().entries_by_analysis().get("crossings") == 1


@pytest.fixture(autouse=True)
def _offscreen(monkeypatch):
    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
