"""`phasewake open --smoke-test`: the window opens offscreen, draws a panel, says so in one line.

The run is an energy table of an undamped harmonic oscillator, x = cos(w t): potential
0.5 k x^2 and kinetic 0.5 k (1 - x^2) sum to a constant (analytic solution), so the Energy panel has
something real to draw while the panels that need frames say so at once (a fast test).
"""

import numpy as np
from PySide6 import QtCore

from phasewake.app.cli import main
from phasewake.app.window import launch


def _oscillator_table(path):
    t = np.linspace(0.0, 10.0, 501)  # ps
    k = 100.0  # kJ/mol/nm^2, amplitude 1 nm
    x = np.cos(2.0 * np.pi * t / 2.5)
    rows = "\n".join(f"{a:.4f},{0.5 * k * b * b:.6f},{0.5 * k * (1 - b * b):.6f}" for a, b in zip(t, x))
    path.write_text("time (ps),potential energy (kJ/mol),kinetic energy (kJ/mol)\n" + rows + "\n")
    return path


def _settings(tmp_path):
    return QtCore.QSettings(str(tmp_path / "settings.ini"), QtCore.QSettings.Format.IniFormat)


def test_smoke_test_reports_panels_drawn(qapp, tmp_path, capsys):
    table = _oscillator_table(tmp_path / "energies.csv")
    code = launch([str(table)], smoke_test=True, smoke_timeout_s=30, settings=_settings(tmp_path))
    out = capsys.readouterr()
    assert code == 0, out.err
    lines = out.out.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("smoke test: window opened, ")
    drawn = int(lines[0].split("window opened, ")[1].split()[0])
    assert drawn >= 1  # at least the Energy panel
    # the smoke test leaves the first-run flag alone (it is not a user's first start)
    assert _settings(tmp_path).value("guide_shown") is None


def test_smoke_test_fails_on_a_file_no_reader_claims(qapp, tmp_path, capsys):
    bad = tmp_path / "notes.xyzzy"
    bad.write_text("not a run\n")
    code = main(["open", "--smoke-test", "--smoke-timeout", "20", str(bad)])
    out = capsys.readouterr()
    assert code == 1
    assert out.out == ""
    assert out.err.startswith("smoke test failed:") and len(out.err.strip().splitlines()) == 1


def test_open_with_units_opens_a_lammps_dump_without_its_log(qapp, capsys):
    # 'phasewake open --units real' states the style of a dump whose log is not given; without it the window
    # would ask (tests/app/test_window_practice.py)
    from pathlib import Path

    folder = Path(__file__).resolve().parents[1] / "data" / "engines" / "lammps" / "argon_real_nve"
    code = main(["open", "--smoke-test", "--smoke-timeout", "60", "--units", "real",
                 str(folder / "dump.lammpstrj"), str(folder / "argon.data")])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert out.out.startswith("smoke test: window opened, ")
