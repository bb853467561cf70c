"""``phasewake crossings`` on the bundled sample runs: output, events table, exit codes."""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
LANGEVIN = SAMPLES / "dimer_langevin.h5md"
NVE = SAMPLES / "dimer_nve.h5md"
COORD = "distance(0, 1)"

pytestmark = pytest.mark.skipif(not LANGEVIN.exists(), reason="sample runs not generated")


def sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def test_json_reports_transitions_recrossings_and_rates_both_ways(capsys):
    before = sha(LANGEVIN)
    rc = main(["crossings", str(LANGEVIN), "-c", COORD, "--json"])
    out = json.loads(capsys.readouterr().out)
    assert rc in (0, 1)
    assert out["settings"]["unit"] == "nm"
    assert out["n_transitions"] > 0 and out["n_recrossings"] > 0
    for key in ("rate_ab", "rate_ba"):
        r = out[key]
        assert r["n_transitions"] > 0
        assert r["ci_low_per_ps"] < r["rate_per_ps"] < r["ci_high_per_ps"]
    # every number leaving core carries its unit in its name
    assert "exposure_ps" in out["rate_ab"] and "total_time_ps" in out
    assert len(out["events"]) == out["n_crossings"]
    assert {e["kind"] for e in out["events"]} <= {"transition", "recrossing", "censored"}
    assert sha(LANGEVIN) == before  # input read-only


def test_text_output_and_events_csv(tmp_path, capsys):
    ev = tmp_path / "events.csv"
    rc = main(["crossings", str(LANGEVIN), "-c", COORD, "--states", "0.42,0.53", "--surface", "0.475",
               "--events", str(ev)])
    text = capsys.readouterr().out
    assert rc in (0, 1)
    assert "states (given): A is q <= 0.42, B is q >= 0.53 nm" in text
    assert "k(A->B) =" in text and "k(B->A) =" in text
    assert "heuristics" in text
    with ev.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert rows and set(rows[0]) >= {"time (ps)", "kind", "velocity (nm/ps)", "direction"}
    times = np.array([float(r["time (ps)"]) for r in rows])
    assert np.all(np.diff(times) > 0)
    assert {r["kind"] for r in rows} <= {"transition", "recrossing", "censored"}
    tr = [r for r in rows if r["kind"] == "transition"]
    assert tr and all(float(r["path_duration (ps)"]) > 0 for r in tr)
    # direction agrees with the sign of dq/dt at the crossing (stored velocities of the run)
    assert all((int(r["direction"]) > 0) == (float(r["velocity (nm/ps)"]) > 0) for r in rows
               if abs(float(r["velocity (nm/ps)"])) > 0.05)


def test_replicas_pool(capsys):
    reps = [str(SAMPLES / f"dimer_langevin{s}.h5md") for s in ("", "_r2", "_r3")]
    if not all(Path(r).exists() for r in reps):
        pytest.skip("replica sample runs not generated")
    rc = main(["crossings", *reps, "--replicas", "-c", COORD, "--states", "0.42,0.53", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert rc in (0, 1)
    assert out["n_replicas"] == 3 and out["runs"][0] == "dimer_langevin"
    main(["crossings", reps[0], "-c", COORD, "--states", "0.42,0.53", "--json"])
    one = json.loads(capsys.readouterr().out)
    assert out["rate_ab"]["n_transitions"] >= one["rate_ab"]["n_transitions"]
    assert {e["replica"] for e in out["events"]} <= {0, 1, 2}


@pytest.mark.parametrize("extra,needle", [
    (["--states", "0.6,0.5"], "overlap"),
    (["--states", "0.4,5", "--surface", "3"], "outside the range of the coordinate"),
    (["--states", "0.4,0.5", "--surface", "3"], "strictly between the cores"),
    (["--states", "abc"], "--states must be 2 number"),
    (["--states", "0.4,0.5", "--surface", "0.45", "--confidence", "2"], "--confidence"),
])
def test_bad_input_exits_2_with_one_line(capsys, extra, needle):
    rc = main(["crossings", str(NVE), "-c", COORD, *extra])
    err = capsys.readouterr().err
    assert rc == 2
    assert needle in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_bad_coordinate_exits_2(capsys):
    rc = main(["crossings", str(NVE), "-c", "distance(0, 999)"])
    assert rc == 2
    assert "Traceback" not in capsys.readouterr().err


def test_events_never_over_an_input(tmp_path, capsys):
    target = tmp_path / "copy.h5md"
    target.write_bytes(LANGEVIN.read_bytes())
    before = sha(target)
    rc = main(["crossings", str(target), "-c", COORD, "--states", "0.42,0.53", "--events", str(target)])
    assert rc == 2 and "input file" in capsys.readouterr().err
    assert sha(target) == before


def test_no_transitions_gives_upper_bound_and_exit_1(capsys):
    # A core B beyond the largest distance the dimer reaches: no A->B transition at all.
    rc = main(["crossings", str(LANGEVIN), "-c", COORD, "--states", "0.42,0.7", "--surface", "0.475",
               "--json"])
    out = json.loads(capsys.readouterr().out)
    assert rc == 1
    r = out["rate_ab"]
    assert r["n_transitions"] == 0 and r["upper_bound_only"]
    assert r["ci_high_per_ps"] > 0 and "upper limit" in r["message"]
    assert any("never enters core B" in w for w in out["warnings"])


def test_unwritable_events_path_exits_2(tmp_path, capsys):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file, not a folder")
    rc = main(["crossings", str(NVE), "-c", COORD, "--states", "0.42,0.53", "--events", str(blocker / "ev.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and "cannot write the events table" in err and "Traceback" not in err


def test_kappa_window_and_confidence_options(capsys):
    base = ["crossings", str(LANGEVIN), "-c", COORD, "--states", "0.42,0.53", "--surface", "0.475", "--json"]
    main(base + ["--kappa-window", "0.5,1.0"])
    a = json.loads(capsys.readouterr().out)
    assert a["settings"]["kappa_window_ps"] == [0.5, 1.0]
    assert a["kappa"]["plateau_window_ps"] == [0.5, 1.0]
    main(base + ["--confidence", "0.99"])
    b = json.loads(capsys.readouterr().out)
    # a 99% exact interval contains the 95% one (same count and exposure)
    assert b["rate_ab"]["ci_low_per_ps"] < a["rate_ab"]["ci_low_per_ps"]
    assert b["rate_ab"]["ci_high_per_ps"] > a["rate_ab"]["ci_high_per_ps"]
    assert b["rate_ab"]["rate_per_ps"] == pytest.approx(a["rate_ab"]["rate_per_ps"])


ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm"


@pytest.mark.parametrize("name,why", [("tip3p_rigid_nve_verlet", "the coordinate is constant"),
                                      ("tip3p_flexible_frames_1fs", "stiff bond")])
def test_water_bond_gets_no_states_one_line_exit_2(name, why, capsys):
    # water made with OpenMM (tests/data/engines): an O-H bond of rigid water is constant to round-off (the
    # issue: "rates" of 135/ps), of flexible water a vibration whose turning points looked like two states
    folder = ENGINES / name
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    rc = main(["crossings", str(folder / "frames.h5md"), "--top", str(folder / "start.pdb"), "-c", COORD,
               "--no-cache"])
    err = capsys.readouterr().err
    assert rc == 2 and len(err.strip().splitlines()) == 1
    assert why in err


def test_threads_option_changes_nothing_in_the_numbers(capsys, monkeypatch):
    from phasewake.core import settings

    monkeypatch.setattr(settings, "_threads", None)  # restored after the test (the option sets it)
    outs = []
    for n in ("1", "2"):
        assert main(["crossings", str(LANGEVIN), "-c", COORD, "--json", "--no-cache", "--threads", n]) in (0, 1)
        outs.append(capsys.readouterr().out)
    assert outs[0] == outs[1] and settings.threads() == 2
    with pytest.raises(SystemExit) as exc:  # argparse's own usage error: exit 2, one message
        main(["crossings", str(LANGEVIN), "-c", COORD, "--threads", "0"])
    assert exc.value.code == 2 and "at least 1 thread" in capsys.readouterr().err
