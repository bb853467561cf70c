"""--workers and --scheduler on the command line; Ctrl-C with worker processes running."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from phasewake.app.cli import main
from phasewake.core.model import parallel
from tests.core.test_parallel import make_xtc


@pytest.fixture(autouse=True)
def _worker_setting_given_back(monkeypatch):
    """--workers is a process setting (parallel.set_workers): each test here leaves it as it found it, so a
    later test's pass does not go to workers it never asked for."""
    monkeypatch.setattr(parallel, "_workers", parallel._workers)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_an_unreachable_scheduler_is_one_line_and_exit_2(tmp_path, capsys):
    xtc, pdb = make_xtc(tmp_path)
    out = tmp_path / "q.csv"
    code = main(["coords", str(xtc), "--top", str(pdb), "-c", "distance(0, 1)", "-o", str(out),
                 "--scheduler", f"tcp://127.0.0.1:{_free_port()}"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "cannot reach the Dask scheduler" in err and "Traceback" not in err
    assert not out.exists()


def test_workers_must_be_a_positive_whole_number(tmp_path, capsys):
    xtc, pdb = make_xtc(tmp_path)
    with pytest.raises(SystemExit) as stop:
        main(["coords", str(xtc), "--top", str(pdb), "-c", "distance(0, 1)", "--workers", "0"])
    assert stop.value.code == 2 and "--workers" in capsys.readouterr().err


def test_help_says_where_workers_help(capsys):
    with pytest.raises(SystemExit):
        main(["coords", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--workers N" in text and "XTC, TRR and DCD" in text and "1 for H5MD" in text
    assert "--scheduler ADDRESS" in text


def test_coords_with_two_workers_writes_what_one_worker_writes(tmp_path, capsys, spy_on):
    xtc, pdb = make_xtc(tmp_path, n_frames=300)
    used = spy_on(parallel, "ranges_pass", lambda a, kw: kw.get("workers"))
    one, two = tmp_path / "one.csv", tmp_path / "two.csv"
    base = ["coords", str(xtc), "--top", str(pdb), "-c", "distance(0, 1)", "-c", "angle(0, 1, 2)", "--no-cache"]
    assert main([*base, "-o", str(one), "--workers", "1"]) == 0
    assert main([*base, "-o", str(two), "--workers", "2"]) == 0
    assert two.read_bytes() == one.read_bytes()
    # once the coordinates consumer can merge partial states, the two-worker command reads in ranges
    from phasewake.core.model import framepass

    consumer = getattr(framepass, "CoordinatesConsumer", None)
    if consumer is not None and callable(getattr(consumer, "merge", None)):
        assert 2 in used
    assert parallel._workers is None or parallel._workers == 2  # the last command's own setting


CTRL_C_CHILD = textwrap.dedent("""
    import sys
    from phasewake.core import interrupts
    from phasewake.core.model import parallel
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run
    from phasewake.core.settings import chunking
    from tests.parallel_consumers import FrameSums

    run = open_run([sys.argv[1]], topology=sys.argv[2])
    seen = []

    def show(p):
        if p.done > 0 and not seen:
            seen.append(1)
            print("running", flush=True)

    try:
        with interrupts.handling():
            with chunking(frames=2):
                drive(parallel.ranges_pass(run, {"s": FrameSums(pause_s=0.3)}, workers=2), show,
                      interrupts.token())
    except Exception as exc:
        print("stopped:", type(exc).__name__, flush=True)
        sys.exit(130)
    print("finished", flush=True)
""")


@pytest.mark.slow  # worker processes and a signal: ~1 s of CPU, more wall
def test_ctrl_c_stops_every_worker(tmp_path):
    psutil = pytest.importorskip("psutil")
    xtc, pdb = make_xtc(tmp_path, n_frames=400)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    child = subprocess.Popen([sys.executable, "-c", CTRL_C_CHILD, str(xtc), str(pdb)], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True, env=env, start_new_session=True)
    try:
        assert child.stdout.readline().strip() == "running"
        family = psutil.Process(child.pid).children(recursive=True)
        assert len(family) >= 2  # the workers (and the server they are forked from)
        t0 = time.monotonic()
        os.killpg(child.pid, signal.SIGINT)  # as a terminal's Ctrl-C: the whole process group
        out, err = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
    assert "stopped: Cancelled" in out and child.returncode == 130
    assert time.monotonic() - t0 < 30
    assert "Traceback" not in err and "KeyboardInterrupt" not in err
    time.sleep(0.5)
    assert not [p for p in family if p.is_running() and p.status() != psutil.STATUS_ZOMBIE]


SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def test_replicas_over_two_workers_pool_as_over_one(capsys, spy_on):
    import json

    from phasewake.core.analyses.crossings import request as crossings_request

    spread = spy_on(crossings_request, "replica_coordinates", lambda a, kw: len(a[0]))
    files = [str(SAMPLES / f"dimer_langevin{s}.h5md") for s in ("", "_r2", "_r3")]
    base = ["crossings", *files, "--replicas", "-c", "distance(0, 1)", "--json", "--no-cache"]
    main([*base, "--workers", "1"])
    one = json.loads(capsys.readouterr().out)
    assert spread == []
    main([*base, "--workers", "2"])
    two = json.loads(capsys.readouterr().out)
    assert spread == [3]
    assert two == one  # every count, rate and table equal: the same series, pooled alike


def test_a_script_without_a_main_guard_can_use_workers(tmp_path):
    # a notebook-style script: no `if __name__ == "__main__":` (workers must not run it again)
    xtc, pdb = make_xtc(tmp_path, n_frames=64)
    script = tmp_path / "user_script.py"
    script.write_text(textwrap.dedent(f"""
        from phasewake.core.model import parallel
        from phasewake.core.progress import drive
        from phasewake.core.readers import open_run
        from phasewake.core.settings import chunking
        from tests.parallel_consumers import FrameSums

        print("top level ran")
        run = open_run([{str(xtc)!r}], topology={str(pdb)!r})
        with chunking(frames=8):
            got = drive(parallel.ranges_pass(run, {{"s": FrameSums()}}, workers=2))
        print("frames", got["s"]["count"])
    """))
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split("\n")[:2] == ["top level ran", "frames 64"]


def test_the_window_notes_what_the_user_stated_for_the_workers():
    # a worker that opens a run again (a DCD) must open it as the window did, with the stated time step
    from phasewake.app.window.model import RunSettings
    from phasewake.app.window.opening import default_opener

    samples = Path(__file__).resolve().parents[2] / "sample_data"
    settings = RunSettings(timestep_fs=1.5, temperature_K=290.0)
    run = default_opener([str(samples / "dimer_nve.dcd")], str(samples / "dimer_nve.pdb"), settings)
    files = parallel.files_of(run)
    assert dict(files.options) == settings.overrides() and files.topology == str(samples / "dimer_nve.pdb")
    again = files.open()
    assert again.metadata.timestep_ps == run.metadata.timestep_ps == pytest.approx(0.0015)
