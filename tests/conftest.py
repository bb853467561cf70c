"""Shared test set-up. Qt must be offscreen before it starts (no display in CI)."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("MPLBACKEND", "Agg")


# --- real OpenMM runs (tests/engine_runs.py), made once per test session --------------------------
# Use in a test as an argument:  def test_x(openmm_water_1fs): run = openmm_water_1fs  (an EngineRun)
#   run.positions_nm (F, N, 3), run.velocities_nm_per_ps, run.kinetic_kJ_per_mol, run.potential_kJ_per_mol,
#   run.time_ps, run.step, run.masses_amu, run.n_constraints, run.n_dof, run.temperature_K, run.box_nm,
#   run.topology, run.paths["h5md" | "mdtraj_h5" | "dcd" | "pdb" | "csv"].
# Both start from the same equilibrated state; 4 fs differs only in the time step (same 0.6 ps span; 101 and 76 reports).
# Each costs a few seconds: mark tests that use them @pytest.mark.slow.
import pytest  # noqa: E402


def _engine_runs():
    """tests/engine_runs.py, importable whether or not the project root is on sys.path."""
    try:
        from tests import engine_runs
    except ModuleNotFoundError:
        import importlib.util
        import sys
        from pathlib import Path

        spec = importlib.util.spec_from_file_location("tests.engine_runs", Path(__file__).with_name("engine_runs.py"))
        engine_runs = importlib.util.module_from_spec(spec)
        sys.modules["tests.engine_runs"] = engine_runs
        spec.loader.exec_module(engine_runs)
    return engine_runs


@pytest.fixture(scope="session")
def openmm_water_1fs(tmp_path_factory):
    return _engine_runs().water_box_nve(tmp_path_factory.mktemp("openmm_water"), dt_fs=1.0, n_steps=600, report_every=6)


@pytest.fixture(scope="session")
def openmm_water_4fs(tmp_path_factory):
    return _engine_runs().water_box_nve(tmp_path_factory.mktemp("openmm_water"), dt_fs=4.0, n_steps=150, report_every=2)


# --- inputs are never written ------------------------------------------------------------
# Every sample file's sha256 is taken when the test session starts and checked when it ends: a full
# run of every command over the sample data must leave them byte for byte unchanged.
import hashlib  # noqa: E402
from pathlib import Path as _Path  # noqa: E402

_SAMPLES = _Path(__file__).resolve().parents[1] / "sample_data"
_SAMPLE_HASHES: dict[str, str] = {}


def _sample_hashes() -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(_SAMPLES.iterdir()) if p.is_file() and p.suffix in (".h5md", ".dcd", ".pdb", ".csv")}


def pytest_sessionstart(session):
    _SAMPLE_HASHES.update(_sample_hashes())


def pytest_sessionfinish(session, exitstatus):
    if not _SAMPLE_HASHES:
        return
    now = _sample_hashes()
    changed = sorted(k for k in _SAMPLE_HASHES if now.get(k) != _SAMPLE_HASHES[k])
    if changed:
        import sys

        sys.stderr.write(f"\nERROR: the test run modified sample inputs: {', '.join(changed)}\n")
        session.exitstatus = 1


# --- the result cache never touches ~/.cache during tests ---------------------------------
@pytest.fixture(scope="session", autouse=True)
def _session_cache_dir(tmp_path_factory):
    """Point PHASEWAKE_CACHE_DIR at a session temporary folder (tests may monkeypatch it further)."""
    import os

    old = os.environ.get("PHASEWAKE_CACHE_DIR")
    os.environ["PHASEWAKE_CACHE_DIR"] = str(tmp_path_factory.mktemp("phasewake_cache"))
    yield
    if old is None:
        os.environ.pop("PHASEWAKE_CACHE_DIR", None)
    else:
        os.environ["PHASEWAKE_CACHE_DIR"] = old


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    """A result cache of the test's own (PHASEWAKE_CACHE_DIR), switched on whatever the environment says."""
    d = tmp_path / "cache"
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(d))
    monkeypatch.delenv("PHASEWAKE_NO_CACHE", raising=False)
    return d


@pytest.fixture
def h5md_reads(monkeypatch):
    """Counts the H5MD reader's chunk iterations (``h5md_reads["n"]``): every analysis of an H5MD file's
    frames goes through it, so a cache hit or a shared pass shows as fewer reads."""
    from phasewake.core.readers import h5md

    count = {"n": 0}
    original = h5md.H5MDFrames.iter_chunks

    def counting(self, **kw):
        count["n"] += 1
        yield from original(self, **kw)

    monkeypatch.setattr(h5md.H5MDFrames, "iter_chunks", counting)
    return count


@pytest.fixture
def spy_on(monkeypatch):
    """``calls = spy_on(module, "name", note)``: the generator function ``module.name`` replaced for the test by
    one that appends ``note(args, kwargs)`` of each call to ``calls`` and then runs the real one."""

    def install(module, name, note):
        calls = []
        real = getattr(module, name)

        def spy(*a, **kw):
            calls.append(note(a, kw))
            return (yield from real(*a, **kw))

        monkeypatch.setattr(module, name, spy)
        return calls

    return install


# --- the sample run's report, built once per test session --------------------------------------------
@pytest.fixture(scope="session")
def sample_report(tmp_path_factory):
    """`phasewake report` of a copy of sample_data/dimer_nve.h5md with ``--coordinate distance(0, 1)`` and an
    empty cache of its own, run once: ``code``, ``out``, ``err`` (what the command printed), ``src`` (the
    input copy) and ``before`` (its sha256 before), ``pdf`` (the report) and ``reads`` (``{"n": ...}``, the
    H5MD reader's chunk iterations while it ran, as the ``h5md_reads`` fixture counts them)."""
    import contextlib
    import io
    import shutil
    import types

    from phasewake.app.cli import main
    from phasewake.core.readers import h5md

    root = tmp_path_factory.mktemp("sample_report")
    src = root / "in" / "dimer_nve.h5md"
    src.parent.mkdir()
    shutil.copy(_SAMPLES / "dimer_nve.h5md", src)
    before = hashlib.sha256(src.read_bytes()).hexdigest()
    pdf = root / "out" / "r.pdf"
    reads = {"n": 0}
    original = h5md.H5MDFrames.iter_chunks

    def counting(self, **kw):
        reads["n"] += 1
        yield from original(self, **kw)

    out, err = io.StringIO(), io.StringIO()
    with pytest.MonkeyPatch.context() as mp, contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        mp.setattr(h5md.H5MDFrames, "iter_chunks", counting)
        mp.setenv("PHASEWAKE_CACHE_DIR", str(root / "cache"))
        mp.delenv("PHASEWAKE_NO_CACHE", raising=False)
        code = main(["report", str(src), "-o", str(pdf), "--coordinate", "distance(0, 1)"])
    return types.SimpleNamespace(code=code, out=out.getvalue(), err=err.getvalue(), src=src, before=before, pdf=pdf,
                                 reads=reads)
