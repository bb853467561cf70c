"""Data safety through the real command line: the cache owns only its own files, full disks and signals
fail cleanly, outputs keep normal permissions, interrupted work leaves nothing behind.

Every case runs ``phasewake`` as a user meets it: in-process ``main(argv)`` where it can, a subprocess
where a resource limit (RLIMIT_FSIZE stands in for a full disk: write() then fails with EFBIG, since
Python ignores SIGXFSZ) or a signal is needed. Each checks the exit code, that stderr is one line with no
"Traceback", and that the inputs hash the same before and after.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.store.atomic import STALE_AFTER_S, temp_name
from phasewake.core.store.cache import ENTRY_SUFFIX, MARK_NAME, ResultCache, take_notices

pytestmark = pytest.mark.slow  # real command runs, full disks and signals: 49 s of CPU in all

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
NVE = SAMPLES / "dimer_nve.h5md"
LANGEVIN = SAMPLES / "dimer_langevin.h5md"
COORD = "distance(0, 1)"
FORTY_DAYS = 40 * 86400


def sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def tree(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` with its hash (what a user owns, before and after)."""
    return {str(p.relative_to(folder)): sha(p) for p in sorted(folder.rglob("*")) if p.is_file()}


def cli(argv: list[str], capsys) -> tuple[int, str, str]:
    capsys.readouterr()
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def one_clean_line(err: str) -> str:
    assert "Traceback" not in err and "Exception ignored" not in err, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    return lines[0]


@pytest.fixture
def run_copy(tmp_path) -> Path:
    d = tmp_path / "data"
    d.mkdir()
    p = d / "dimer_nve.h5md"
    shutil.copy(NVE, p)
    return p


def _age(p: Path, seconds: float) -> None:
    t = time.time() - seconds
    os.utime(p, (t, t))


def _sub(args: list[str], *, env: dict[str, str] | None = None, fsize: int | None = None, cwd: Path | None = None,
         timeout: float = 300) -> subprocess.CompletedProcess:
    """``python -m phasewake.app ARGS`` (or ``python -c CODE`` when args[0] == "-c"), optionally with a
    file-size limit that makes every write beyond ``fsize`` bytes fail with EFBIG, like a full disk."""
    def limit() -> None:
        import resource

        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        if fsize is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (fsize, fsize))

    cmd = [sys.executable, *args] if args[0] == "-c" else [sys.executable, "-m", "phasewake.app", *args]
    full_env = {**os.environ, **(env or {})}
    return subprocess.run(cmd, capture_output=True, text=True, env=full_env, preexec_fn=limit, cwd=cwd,
                          timeout=timeout)


# ---------------------------------------------------------------------------------------------------
# 1. the cache deletes only what it wrote
# ---------------------------------------------------------------------------------------------------

def test_unmarked_folder_with_a_users_run_is_refused_and_untouched(tmp_path, run_copy, monkeypatch, capsys):
    # PHASEWAKE_CACHE_DIR pointed at a folder of the user's: a run named run.h5 and notes, 40 days old
    folder = tmp_path / "my-runs"
    folder.mkdir()
    shutil.copy(NVE, folder / "run.h5")
    (folder / "notes.txt").write_text("do not delete\n")
    for p in folder.iterdir():
        _age(p, FORTY_DAYS)
    before, before_in = tree(folder), sha(run_copy)
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(folder))
    monkeypatch.delenv("PHASEWAKE_NO_CACHE", raising=False)
    for argv in (["coords", str(run_copy), "-c", COORD], ["cache", "--clear"], ["cache"],
                 ["coords", str(folder / "run.h5"), "-c", COORD]):
        rc, out, err = cli(argv, capsys)
        line = one_clean_line(err)
        assert rc == 2 and str(folder) in line and "mark" in line and "nothing in it was changed" in line, line
        assert tree(folder) == before and sorted(p.name for p in folder.iterdir()) == ["notes.txt", "run.h5"]
    assert sha(run_copy) == before_in
    # --no-cache still works there
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD, "--no-cache"], capsys)
    assert rc == 0 and err == "" and tree(folder) == before


def test_users_files_in_our_cache_folder_survive_prune_and_clear(tmp_path, run_copy, cache_dir, capsys):
    # A marked cache folder into which a user dropped a run (.h5) and an unrelated file, both 40 days old.
    rc, out, _ = cli(["coords", str(run_copy), "-c", COORD], capsys)
    assert rc == 0 and (cache_dir / MARK_NAME).is_file()
    users = {"run.h5": NVE.read_bytes(), "results.dat": b"1 2 3\n",
             "0123456789abcdef0123456789abcdef.h5": b"a name like an old entry\n",
             "0123456789abcdef0123456789abcdef" + ENTRY_SUFFIX + ".bak": b"x"}
    for name, data in users.items():
        (cache_dir / name).write_bytes(data)
        _age(cache_dir / name, FORTY_DAYS)
    # one of our entries, aged 40 days too: prune removes it, and only it
    ours = next(cache_dir.glob("*" + ENTRY_SUFFIX))
    _age(ours, FORTY_DAYS)
    rc, _, err = cli(["coords", str(run_copy), "-c", "distance(1, 0)"], capsys)
    assert rc == 0 and err == ""
    assert not ours.exists()  # pruned: it was ours and old
    assert {n: (cache_dir / n).read_bytes() for n in users} == users
    assert len(list(cache_dir.glob("*" + ENTRY_SUFFIX))) == 1
    rc, out, err = cli(["cache", "--clear"], capsys)
    assert rc == 0 and "removed 1 " in out and err == ""
    assert {n: (cache_dir / n).read_bytes() for n in users} == users
    assert sorted(p.name for p in cache_dir.iterdir()) == sorted([MARK_NAME, *users])


def test_a_link_named_like_an_entry_is_not_followed_or_deleted(tmp_path, run_copy, cache_dir, capsys):
    cli(["coords", str(run_copy), "-c", COORD], capsys)
    victim = tmp_path / "precious.pwcache"
    victim.write_bytes(b"phasewake-cache\n" + b"user data")
    link = cache_dir / ("f" * 32 + ENTRY_SUFFIX)
    link.symlink_to(victim)
    rc, out, err = cli(["cache", "--clear"], capsys)
    assert rc == 0 and err == "" and link.is_symlink() and victim.read_bytes().endswith(b"user data")


# ---------------------------------------------------------------------------------------------------
# 2. a cache that cannot be written never fails the analysis
# ---------------------------------------------------------------------------------------------------

def test_full_cache_disk_prints_the_result_and_one_warning(tmp_path, run_copy):
    cache = tmp_path / "cache"
    before = sha(run_copy)
    plain = _sub(["coords", str(run_copy), "-c", COORD, "--no-cache"])
    assert plain.returncode == 0
    # 2 kB: the mark fits, the entry (65 kB) does not; stdout is a pipe, not limited
    got = _sub(["coords", str(run_copy), "-c", COORD], env={"PHASEWAKE_CACHE_DIR": str(cache)}, fsize=2048)
    assert got.returncode == 0 and got.stdout == plain.stdout
    line = one_clean_line(got.stderr)
    assert "warning: cache skipped" in line and str(cache) in line, line
    assert sorted(p.name for p in cache.iterdir()) == [MARK_NAME]  # no entry, no temporary file
    assert sha(run_copy) == before
    # every cached verb: audit and crossings as well
    for argv in (["audit", str(run_copy)], ["crossings", str(run_copy), "-c", COORD]):
        got = _sub(argv, env={"PHASEWAKE_CACHE_DIR": str(cache)}, fsize=2048)
        assert got.returncode in (0, 1) and got.stdout.strip(), got.stderr
        assert "cache skipped" in one_clean_line(got.stderr)
        assert sorted(p.name for p in cache.iterdir()) == [MARK_NAME]


def test_cache_folder_that_cannot_be_made_prints_the_result_and_one_warning(tmp_path, run_copy, monkeypatch,
                                                                               capsys):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file where the cache's parent folder would be")
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(blocker / "cache"))
    monkeypatch.delenv("PHASEWAKE_NO_CACHE", raising=False)
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD], capsys)
    assert rc == 0 and "distance" in out
    assert "cache skipped" in one_clean_line(err)
    assert blocker.read_text().startswith("a file")


# ---------------------------------------------------------------------------------------------------
# 3. an output onto a full disk: one line, exit 2, the old file intact, no litter
# ---------------------------------------------------------------------------------------------------

FULL_DISK_OUTPUTS = {
    "coords-h5md": (["coords", "{run}", "-c", COORD, "-o", "{out}"], "x.h5md"),
    "coords-csv": (["coords", "{run}", "-c", COORD, "-o", "{out}"], "x.csv"),
    "report-pdf": (["report", "{run}", "--coordinate", COORD, "-o", "{out}"], "x.pdf"),
    "report-html": (["report", "{run}", "--coordinate", COORD, "-o", "{dir}/x.pdf", "--html"], "x.html"),
    "crossings-events": (["crossings", "{run}", "-c", COORD, "--states", "0.42,0.53", "--events", "{out}"],
                         "events.csv"),
}


@pytest.mark.parametrize("case", list(FULL_DISK_OUTPUTS))
def test_output_onto_a_full_disk(tmp_path, run_copy, case):
    argv, name = FULL_DISK_OUTPUTS[case]
    outdir = tmp_path / "out"
    outdir.mkdir()
    out = outdir / name
    out.write_bytes(b"the previous file\n")
    os.chmod(out, 0o640)
    before = sha(run_copy)
    fsize = 512  # smaller than every output here (the events table is 1.6 kB)
    if case == "report-html":  # the PDF (~0.2 MB) fits, the HTML (~0.7 MB, figures inside) does not
        fsize = 400_000
    args = [a.format(run=run_copy, out=out, dir=outdir) for a in argv]
    got = _sub(args, env={"PHASEWAKE_NO_CACHE": "1"}, fsize=fsize)
    line = one_clean_line(got.stderr)
    assert got.returncode == 2, got.stderr
    assert str(out) in line and ("too large" in line or "no space" in line), line
    assert out.read_bytes() == b"the previous file\n" and stat.S_IMODE(out.stat().st_mode) == 0o640
    litter = sorted(p.name for p in outdir.iterdir() if p.name not in (name, "x.pdf"))
    assert litter == []
    assert sha(run_copy) == before


def test_session_file_onto_a_full_disk(tmp_path):
    # the window's session writer (app/window/session.py save); the window shows the error in a message
    target = tmp_path / "work.pwsession"
    target.write_text("previous session\n")
    os.chmod(target, 0o600)
    code = textwrap.dedent(f"""
        import sys
        from phasewake.app.window import session
        from phasewake.core.errors import PhasewakeError
        try:
            session.save(session.SessionState(coordinate="x" * 100_000), {str(target)!r})
        except PhasewakeError as exc:
            print(exc, file=sys.stderr)
            sys.exit(2)
        """)
    got = _sub(["-c", code], fsize=4096)
    line = one_clean_line(got.stderr)
    assert got.returncode == 2 and str(target) in line and "too large" in line, line
    assert target.read_text() == "previous session\n" and _mode(target) == 0o600
    assert [p.name for p in tmp_path.iterdir()] == [target.name]


# ---------------------------------------------------------------------------------------------------
# 4. a damaged cache entry is never served
# ---------------------------------------------------------------------------------------------------

def test_bytes_flipped_in_a_stored_array_are_a_miss_recomputed_and_replaced(run_copy, cache_dir, capsys):
    rc, fresh, _ = cli(["coords", str(run_copy), "-c", COORD, "--no-cache"], capsys)
    assert rc == 0
    cli(["coords", str(run_copy), "-c", COORD], capsys)
    (entry,) = cache_dir.glob("*" + ENTRY_SUFFIX)
    data = bytearray(entry.read_bytes())
    data[len(data) // 2:len(data) // 2 + 64] = bytes(64)  # 64 bytes inside the stored arrays
    entry.write_bytes(bytes(data))
    before = sha(run_copy)
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD], capsys)
    assert rc == 0 and out == fresh
    assert "damaged" in one_clean_line(err)
    assert entry.exists() and entry.read_bytes() != bytes(data)  # replaced by a good one
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD], capsys)
    assert rc == 0 and out == fresh and err == ""
    assert sha(run_copy) == before


def _entry_with_header(path: Path, key: str, head: dict, payload: bytes = b"") -> None:
    """An entry of the right layout and a valid checksum but odd content (what other code might write)."""
    from phasewake.core.store.cache import _FIXED, LAYOUT, MAGIC

    header = json.dumps(head).encode()
    digest = hashlib.sha256(header + payload).digest()
    path.write_bytes(_FIXED.pack(MAGIC, LAYOUT, len(header), digest, len(payload)) + header + payload)


def test_wrong_typed_meta_and_a_folder_named_like_an_entry_break_nothing(run_copy, cache_dir, capsys):
    rc, fresh, _ = cli(["coords", str(run_copy), "-c", COORD], capsys)
    (entry,) = cache_dir.glob("*" + ENTRY_SUFFIX)
    key = entry.name[: -len(ENTRY_SUFFIX)]
    _entry_with_header(entry, key, {"key": key, "meta": ["not", "a", "mapping"], "arrays": []})
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD], capsys)
    assert rc == 0 and out == fresh and "damaged" in one_clean_line(err)
    rc, out, err = cli(["cache"], capsys)
    assert rc == 0 and err == ""
    # a folder where the entry should be: every run still answers (the store is skipped with a warning)
    entry.unlink()
    entry.mkdir()
    (entry / "inside.txt").write_text("someone's")
    for _ in range(2):
        rc, out, err = cli(["coords", str(run_copy), "-c", COORD], capsys)
        assert rc == 0 and out == fresh and "cache skipped" in one_clean_line(err)
    rc, out, err = cli(["cache", "--clear"], capsys)
    assert rc == 0 and err == "" and (entry / "inside.txt").read_text() == "someone's"


# ---------------------------------------------------------------------------------------------------
# 5. outputs have the permissions a user expects; one atomic writer
# ---------------------------------------------------------------------------------------------------

@pytest.fixture
def umask022():
    old = os.umask(0o022)
    yield
    os.umask(old)


def _mode(p: Path) -> int:
    return stat.S_IMODE(p.stat().st_mode)


def test_outputs_honour_the_umask_and_keep_the_mode_they_replace(tmp_path, run_copy, cache_dir, umask022, capsys):
    outs = {"csv": tmp_path / "q.csv", "h5md": tmp_path / "q.h5md", "events": tmp_path / "ev.csv"}
    assert cli(["coords", str(run_copy), "-c", COORD, "-o", str(outs["csv"])], capsys)[0] == 0
    assert cli(["coords", str(run_copy), "-c", COORD, "-o", str(outs["h5md"])], capsys)[0] == 0
    assert cli(["crossings", str(run_copy), "-c", COORD, "--states", "0.42,0.53", "--events", str(outs["events"])],
               capsys)[0] in (0, 1)
    for p in outs.values():
        assert _mode(p) == 0o644, p
    for p in [*cache_dir.glob("*" + ENTRY_SUFFIX), cache_dir / MARK_NAME]:
        assert _mode(p) == 0o644, p
    from phasewake.core.store.atomic import write_text

    write_text(tmp_path / "s.pwsession", "{}")
    assert _mode(tmp_path / "s.pwsession") == 0o644
    # replacing keeps the mode the user gave the file
    for p, mode in ((outs["csv"], 0o600), (outs["events"], 0o664)):
        os.chmod(p, mode)
    cli(["coords", str(run_copy), "-c", COORD, "-o", str(outs["csv"])], capsys)
    cli(["crossings", str(run_copy), "-c", COORD, "--states", "0.42,0.53", "--events", str(outs["events"])], capsys)
    assert _mode(outs["csv"]) == 0o600 and _mode(outs["events"]) == 0o664


def test_one_atomic_writer_for_the_whole_project():
    # only core/store/atomic.py creates temporary files and renames them into place
    root = Path(__file__).resolve().parents[2]
    offenders = []
    for folder in ("core", "app"):
        for p in (root / folder).rglob("*.py"):
            if p.name == "atomic.py" and p.parent.name == "store":
                continue
            text = p.read_text(encoding="utf-8")
            for needle in ("mkstemp(", "os.replace(", "os.rename(", "NamedTemporaryFile("):
                if needle in text:
                    offenders.append(f"{p.relative_to(root)}: {needle}")
    assert offenders == []


# ---------------------------------------------------------------------------------------------------
# 6. interrupted work leaves nothing behind
# ---------------------------------------------------------------------------------------------------

_SLOW_WRITE = """
import pathlib, sys, time
import phasewake.app.commands.coords as C
real = C._write_csv
def slow(stream, *a, **k):
    real(stream, *a, **k)
    stream.flush()
    pathlib.Path({flag!r}).write_text("writing")
    time.sleep({pause})  # a long write: the signal arrives in the middle of it
C._write_csv = slow
from phasewake.app.cli import main
sys.exit(main({argv!r}))
"""


def _start_and_signal(tmp_path: Path, argv: list[str], sig: int, *, pause: float = 1.5,
                      env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    flag = tmp_path / "flag"
    code = _SLOW_WRITE.format(flag=str(flag), pause=pause, argv=argv)
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, env={**os.environ, "PHASEWAKE_NO_CACHE": "1", **(env or {})})
    deadline = time.monotonic() + 120
    while not flag.exists():
        assert time.monotonic() < deadline and proc.poll() is None, proc.communicate()
        time.sleep(0.02)
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=120)
    return subprocess.CompletedProcess(proc.args, proc.returncode, out, err)


@pytest.mark.parametrize("sig,code,word", [(signal.SIGTERM, 143, "terminated"), (signal.SIGINT, 130, "interrupted")])
def test_signal_during_an_output_write_removes_the_temporary_file(tmp_path, run_copy, sig, code, word):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    out = out_dir / "q.csv"
    out.write_text("previous\n")
    before = sha(run_copy)
    got = _start_and_signal(out_dir, ["coords", str(run_copy), "-c", COORD, "-o", str(out)], sig)
    assert got.returncode == code, got.stderr
    assert word in one_clean_line(got.stderr)
    assert out.read_text() == "previous\n"
    assert sorted(p.name for p in out_dir.iterdir()) == ["flag", "q.csv"]
    assert sha(run_copy) == before


_SLOW_CHUNKS = """
import pathlib, sys, time
import phasewake.core.analyses.coordinates as K
from phasewake.core.progress import Progress
real = K.compute_coordinates
def slow(*a, **k):
    result = yield from real(*a, **k)
    pathlib.Path({flag!r}).write_text("started")
    for i in range(200):  # 200 more chunks of 50 ms: 10 s unless the interrupt is honoured between them
        time.sleep(0.05)
        yield Progress(i, 200, "chunk")
    return result
K.compute_coordinates = slow
from phasewake.app.cli import main
sys.exit(main({argv!r}))
"""


@pytest.mark.parametrize("sig,code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)])
def test_crossings_stops_between_chunks_on_an_interrupt(tmp_path, run_copy, sig, code):
    flag = tmp_path / "flag"
    program = _SLOW_CHUNKS.format(flag=str(flag), argv=["crossings", str(run_copy), "-c", COORD])
    proc = subprocess.Popen([sys.executable, "-c", program], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, env={**os.environ, "PHASEWAKE_NO_CACHE": "1"})
    deadline = time.monotonic() + 120
    while not flag.exists():
        assert time.monotonic() < deadline and proc.poll() is None, proc.communicate()
        time.sleep(0.02)
    t0 = time.monotonic()
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    assert time.monotonic() - t0 < 5.0  # stopped at the next chunk, not after the remaining 10 s
    assert proc.returncode == code and out == ""
    assert one_clean_line(err).startswith("phasewake crossings: ")


def test_crossings_real_work_ctrl_c_is_never_swallowed(tmp_path):
    # The real scan (thread pool included) on a long synthetic series, interrupted repeatedly at random
    # moments: every try ends with exit 130 and one line, never "Exception ignored" and carrying on.
    import h5py

    from phasewake.core.analyses.crossings import crossings_of_runs  # noqa: F401  (the code under test)

    n = 2_000_000  # ~4 s of work on a quiet machine at 400,000 (measured): too short for signals at 2.3-3.5 s
    path = tmp_path / "long.h5md"
    rng = np.random.default_rng(3)
    q = 0.48 + 0.06 * np.sign(np.sin(np.arange(n) / 300.0)) + 0.01 * rng.standard_normal(n)
    pos = np.zeros((n, 2, 3), np.float32)
    pos[:, 1, 0] = q
    with h5py.File(path, "w") as f:
        f.create_group("h5md").attrs["version"] = np.array([1, 1])
        g = f.create_group("particles/all")
        p = g.create_group("position")
        p.create_dataset("value", data=pos).attrs["unit"] = "nm"
        p.create_dataset("step", data=np.arange(n))
        p.create_dataset("time", data=np.arange(n) * 0.01).attrs["unit"] = "ps"
        g.create_dataset("mass", data=np.array([16.0, 16.0]))
    interrupted = 0
    for delay in (0.3, 0.8, 1.5):
        proc = subprocess.Popen([sys.executable, "-m", "phasewake.app", "crossings", str(path), "-c", COORD,
                                 "--states", "0.45,0.51", "--no-cache"], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
        time.sleep(2.0 + delay)  # past the imports, into the work
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=120)
        if proc.returncode in (0, 1):  # it finished (1: a caution found) before the signal: nothing to judge,
            # unless the finish came from swallowing the interrupt and carrying on
            assert "Exception ignored" not in err and "Traceback" not in err, err
            continue
        assert proc.returncode == 130, err
        assert one_clean_line(err) == "phasewake crossings: interrupted"
        interrupted += 1
    assert interrupted >= 2  # the run takes several times the last signal's 3.5 s: the signals land in the work


def test_the_crossings_scan_and_dwell_tests_stop_at_a_noted_interrupt():
    # The long loops of the crossings analysis (the side-change scan, the Monte Carlo of the dwell-time
    # test) look at the noted signal between chunks, also inside their worker threads.
    from phasewake.core import interrupts
    from phasewake.core.analyses.crossings.scan import _scan_part
    from phasewake.core.analyses.rates import exponential_ks_test

    q = np.sin(np.arange(200_000) / 50.0)
    dwell = np.random.default_rng(1).exponential(size=2000)
    with interrupts.handling():
        os.kill(os.getpid(), signal.SIGINT)  # noted by the handler: nothing is raised here
        time.sleep(0.01)
        assert interrupts.requested() == signal.SIGINT
        with pytest.raises(KeyboardInterrupt):
            _scan_part(None, q, 0, q.size, 0.0)
        with pytest.raises(KeyboardInterrupt):
            exponential_ks_test(dwell)
    # outside a command (the window, a library call) the same work runs to the end
    assert len(_scan_part(None, q, 0, q.size, 0.0)[0]) >= 1
    assert 0.0 < exponential_ks_test(dwell).p_value <= 1.0


def test_stale_temporaries_of_a_killed_writer_are_swept_on_the_next_write(tmp_path, run_copy, cache_dir, capsys):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    killed = _start_and_signal(out_dir, ["coords", str(run_copy), "-c", COORD, "-o", str(out_dir / "a.csv")],
                               signal.SIGKILL, pause=60)
    assert killed.returncode == -signal.SIGKILL
    (left,) = [p for p in out_dir.iterdir() if p.name.endswith(".part")]
    fresh = out_dir / temp_name("b.csv")  # a writer busy right now: not stale, kept
    fresh.write_text("busy")
    users = {"movie.part": b"browser download", ".notes.part": b"mine", ".x.0123456789ab.part.keep": b"mine"}
    for name, data in users.items():
        (out_dir / name).write_bytes(data)
        _age(out_dir / name, 10 * STALE_AFTER_S)
    _age(left, 2 * STALE_AFTER_S)
    rc, _, err = cli(["coords", str(run_copy), "-c", COORD, "-o", str(out_dir / "c.csv")], capsys)
    assert rc == 0 and err == ""
    assert not left.exists() and fresh.exists()
    assert {n: (out_dir / n).read_bytes() for n in users} == users
    # in the cache folder: counted by `phasewake cache`, pruned by the next store
    cli(["coords", str(run_copy), "-c", COORD], capsys)
    stale = cache_dir / temp_name("0" * 32 + ENTRY_SUFFIX)
    stale.write_bytes(b"half an entry")
    _age(stale, 2 * STALE_AFTER_S)
    rc, out, _ = cli(["cache"], capsys)
    assert "1 temporary file" in out
    rc, out, _ = cli(["cache", "--json"], capsys)
    assert json.loads(out)["stale_temporary_files"] == 1
    cli(["coords", str(run_copy), "-c", "distance(1, 0)"], capsys)
    assert not stale.exists()


def test_a_legal_250_character_output_name_is_written(tmp_path, run_copy, capsys):
    name = "q" * 246 + ".csv"
    rc, out, err = cli(["coords", str(run_copy), "-c", COORD, "-o", str(tmp_path / name)], capsys)
    assert rc == 0 and err == "" and (tmp_path / name).is_file()
    assert [p.name for p in tmp_path.iterdir() if p.name != "data"] == [name]
    # multi-byte characters: 255 bytes of UTF-8 in the name, the temporary name stays well under 255
    wide = "é" * 125 + ".csv"
    assert len(wide.encode()) <= 255 and len(temp_name(wide).encode()) < 100


def test_notices_do_not_leak_between_commands(capsys):
    take_notices()
    from phasewake.core.store.cache import note

    note("cache skipped: something earlier")
    rc, out, err = cli(["cache", "--json"], capsys)
    assert "something earlier" not in err


def test_entry_written_by_put_is_verified_on_read(tmp_path):
    cache = ResultCache(tmp_path / "c", enabled=True)
    arrays = {"x": np.arange(7.0), "t": np.array(["a", "bc"]), "e": np.zeros((0, 3))}
    cache.put("ab" * 16, arrays, {"analysis": "t"})
    got = cache.get("ab" * 16)
    assert got is not None and got.meta == {"analysis": "t"}
    for k, v in arrays.items():
        np.testing.assert_array_equal(got.arrays[k], v)
        assert got.arrays[k].dtype == v.dtype and got.arrays[k].shape == v.shape


# ---------------------------------------------------------------------------------------------------
# fuzzing: a randomly damaged entry is a miss or the right answer, never a wrong one
# ---------------------------------------------------------------------------------------------------

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

LONG = os.environ.get("PHASEWAKE_FUZZ") == "long"
BUDGET = settings(max_examples=3000 if LONG else 150, deadline=None, derandomize=not LONG,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@pytest.fixture(scope="module")
def stored_result(tmp_path_factory):
    """A real result (coordinate series of the sample run) stored as a cache entry: (folder, key, result, blob)."""
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.progress import drive
    from phasewake.core.readers import open_run
    from phasewake.core.store import codec as resultcodec

    series = drive(compute_coordinates(open_run([NVE]), [COORD, "distance(0, 2)"]))
    folder = tmp_path_factory.mktemp("fuzzcache") / "cache"
    key = "5eed" * 8
    ResultCache(folder, enabled=True).put(key, resultcodec.to_entry(series), {"analysis": "coordinates"})
    blob = (folder / (key + ENTRY_SUFFIX)).read_bytes()
    return folder, key, series, blob


def _same_result(a, b) -> bool:
    """Equal in every field, arrays bit for bit (dtype and shape included)."""
    import dataclasses

    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return (isinstance(a, np.ndarray) and isinstance(b, np.ndarray) and a.dtype == b.dtype
                and a.shape == b.shape and a.tobytes() == b.tobytes())
    if dataclasses.is_dataclass(a):
        return type(a) is type(b) and all(_same_result(getattr(a, f.name), getattr(b, f.name))
                                          for f in dataclasses.fields(a))
    if isinstance(a, (list, tuple)):
        return type(a) is type(b) and len(a) == len(b) and all(_same_result(x, y) for x, y in zip(a, b))
    if isinstance(a, dict):
        return type(b) is dict and a.keys() == b.keys() and all(_same_result(a[k], b[k]) for k in a)
    if isinstance(a, float) and a != a:
        return isinstance(b, float) and b != b
    return type(a) is type(b) and a == b


_MUTATION = st.one_of(
    st.tuples(st.just("flip"), st.floats(0, 1, exclude_max=True), st.integers(1, 255)),
    st.tuples(st.just("overwrite"), st.floats(0, 1, exclude_max=True), st.binary(min_size=1, max_size=64)),
    st.tuples(st.just("truncate"), st.floats(0, 1, exclude_max=True), st.none()),
    st.tuples(st.just("insert"), st.floats(0, 1), st.binary(min_size=1, max_size=16)),
    st.tuples(st.just("append"), st.just(1.0), st.binary(min_size=1, max_size=16)),
)


def _mutate(blob: bytes, mutations) -> bytes:
    data = bytearray(blob)
    for kind, where, value in mutations:
        i = min(int(where * len(data)), max(len(data) - 1, 0))
        if kind == "flip" and data:
            data[i] ^= value
        elif kind == "overwrite":
            data[i:i + len(value)] = value[: max(0, len(data) - i)]
        elif kind == "truncate":
            del data[i:]
        elif kind == "insert":
            data[i:i] = value
        else:
            data.extend(value)
    return bytes(data)


@BUDGET
@given(mutations=st.lists(_MUTATION, min_size=1, max_size=3))
def test_a_damaged_entry_is_a_miss_or_the_right_answer(stored_result, mutations):
    from phasewake.core.store import codec as resultcodec

    folder, key, series, blob = stored_result
    damaged = _mutate(blob, mutations)
    path = folder / (key + ENTRY_SUFFIX)
    path.write_bytes(damaged)
    entry = ResultCache(folder, enabled=True).get(key)
    take_notices()
    if entry is None:  # a miss: the entry is recomputed
        return
    assert _same_result(resultcodec.from_entry(entry.arrays), series)  # served: exactly the stored result
    assert damaged == blob  # (an overwrite with the same bytes; any real change is caught by the checksum)


def test_the_fuzz_is_not_vacuous(stored_result):
    # the pristine entry is served; one flipped payload byte is a miss
    folder, key, series, blob = stored_result
    path = folder / (key + ENTRY_SUFFIX)
    path.write_bytes(blob)
    from phasewake.core.store import codec as resultcodec

    entry = ResultCache(folder, enabled=True).get(key)
    assert entry is not None and _same_result(resultcodec.from_entry(entry.arrays), series)
    path.write_bytes(_mutate(blob, [("flip", 0.9, 1)]))
    assert ResultCache(folder, enabled=True).get(key) is None


# ---------------------------------------------------------------------------------------------------
# the README says how much of this there is
# ---------------------------------------------------------------------------------------------------

def _count_cases(path: Path) -> int:
    """Test cases of a module as pytest collects them (a parametrized test counts once per parameter)."""
    import importlib.util

    spec = importlib.util.spec_from_file_location(f"_count_{path.stem}", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    n = 0
    for name, fn in vars(module).items():
        if name.startswith("test_") and callable(fn):
            k = 1
            for mark in getattr(fn, "pytestmark", []):
                if mark.name == "parametrize":
                    k *= len(mark.args[1])
            n += k
    return n


def test_readme_robustness_paragraph_keeps_the_counts():
    import re

    root = Path(__file__).resolve().parents[2]
    text = (root / "README.md").read_text(encoding="utf-8")
    para = text[text.index("## Robustness"):]
    para = para[: para.find("\n## ", 3) if "\n## " in para[3:] else None]
    para = " ".join(para.split())
    here = Path(__file__).resolve().parent
    n_catalogue = sum(_count_cases(p) for p in sorted(here.glob("test_catalogue*.py")))
    n_safety = _count_cases(here / "test_data_safety.py")
    said = re.search(r"catalogue of (\d+) cases", para)
    assert said and int(said.group(1)) == n_catalogue, (said and said.group(0), n_catalogue)
    said = re.search(r"(\d+) data-safety cases", para)
    assert said and int(said.group(1)) == n_safety, (said and said.group(0), n_safety)
    assert BUDGET.max_examples == (3000 if LONG else 150)
    assert "150 examples" in para and "3000 with `make fuzz`" in para
