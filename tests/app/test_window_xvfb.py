"""The window under a real X server with a window manager (Xvfb + openbox), not the offscreen platform.

The window once died with a segmentation fault after two or three figure exports followed by a report:
the timing of a real event loop (window-manager events, expose events, a busy GUI thread) let a queued
progress signal arrive after its thread was deleted. Offscreen runs never showed it. This test opens the
sample run in a child process under Xvfb and openbox, then fires bursts of figure exports (PNG, SVG, PDF,
CSV) and reports from timers of the running event loop, without waiting for one to end before the next
starts, and checks the child ends normally with every file written.

Needs Xvfb and openbox (Debian packages xvfb and openbox; ``.ci/run`` installs them when it can); skips
with the reason when they are absent, so ``make test`` needs only Python, pip and make.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

pytestmark = [pytest.mark.gui, pytest.mark.slow]
SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"

CHILD = r'''
import sys
from pathlib import Path

import pyqtgraph as pg
from PySide6 import QtCore, QtWidgets

from phasewake.app.window.analyses import PANELS
from phasewake.app.window.main import MainWindow

out = Path(sys.argv[2])
rounds = int(sys.argv[3])
pg.setConfigOptions(antialias=True, background="w", foreground="k")
app = QtWidgets.QApplication(["phasewake-xvfb-test"])
assert app.platformName() == "xcb", app.platformName()
win = MainWindow(settings=QtCore.QSettings(str(out / "settings.ini"), QtCore.QSettings.Format.IniFormat))
win.resize(1024, 640)
win.show()
win.open_paths([sys.argv[1]])
expected = []
state = {"round": 0, "step": 0, "failed": ""}
steps = [(p, fmt) for p, fmt in zip(("Energy", "Phase space", "Correlation", "Sampling", "Crossings", "Landscape"),
                                    ("png", "svg", "pdf", "png", "csv", "pdf"))]


def tick():
    if state["failed"]:
        return
    if state["round"] == 0:  # wait until the panels are drawn
        if win.jobs.busy or win._rest_pending or win._recompute_timer.isActive():
            return
        state["round"] = 1
    if state["step"] < len(steps):
        panel, fmt = steps[state["step"]]
        win.tabs.setCurrentIndex(PANELS.index(panel))
        target = out / f"r{state['round']}-{state['step']}.{fmt}"
        if win.current_panel().current_figure() is not None:
            if fmt == "csv":
                win.export_data_to(target)
            else:
                win.export_figure_to(target, preset="slide", dpi=80)
            expected.append(target)
        state["step"] += 1
        if state["step"] == 3:  # a report in the middle of the burst, as a user pressing Ctrl+R
            report = out / f"r{state['round']}-report.pdf"
            win.export_report_to(report)
            expected.append(report)
        return
    if win.jobs.busy:
        return
    if state["round"] >= rounds:
        app.quit()
        return
    state["round"] += 1
    state["step"] = 0


timer = QtCore.QTimer()
timer.timeout.connect(tick)
timer.start(40)  # faster than the exports end: each burst overlaps the jobs of the one before
QtCore.QTimer.singleShot(480_000, app.quit)  # a loaded machine is slow; a crash is not
app.exec()
timer.stop()
win.jobs.wait_all(30_000)
missing = [str(p) for p in expected if not p.exists() or p.stat().st_size == 0]
print(f"exported {len(expected) - len(missing)} of {len(expected)}; messages: {win.messages}")
win.close()
sys.exit(1 if missing or not expected or win.messages else 0)
'''


def _start_x(tmp_path: Path):
    """Xvfb on a free display (-displayfd) and openbox on it; returns (display, processes)."""
    r, w = os.pipe()
    xvfb = subprocess.Popen(["Xvfb", "-displayfd", str(w), "-screen", "0", "1280x800x24", "-nolisten", "tcp"],
                            pass_fds=(w,), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    os.close(w)
    number = b""
    t0 = time.monotonic()
    while not number.endswith(b"\n") and time.monotonic() - t0 < 20:
        chunk = os.read(r, 16)
        if not chunk:
            break
        number += chunk
    os.close(r)
    if not number.strip():
        xvfb.kill()
        pytest.skip("Xvfb did not start here")
    display = f":{number.decode().strip()}"
    env = dict(os.environ, DISPLAY=display)
    wm = subprocess.Popen(["openbox"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    time.sleep(0.5)
    return display, (wm, xvfb)


def test_bursts_of_exports_and_reports_under_a_real_x_server(tmp_path):
    for tool, package in (("Xvfb", "xvfb"), ("openbox", "openbox")):
        if shutil.which(tool) is None:
            pytest.skip(f"{tool} is not installed (Debian/Ubuntu package {package}); .ci/run installs it as root")
    if not SAMPLE.exists():
        pytest.skip("the sample run sample_data/dimer_nve.h5md is not there")
    display, procs = _start_x(tmp_path)
    try:
        env = {k: v for k, v in os.environ.items() if k != "QT_QPA_PLATFORM"}
        env.update(DISPLAY=display, QT_QPA_PLATFORM="xcb", PYTHONFAULTHANDLER="1")
        from phasewake.app.qt_probe import missing_libraries

        probe = subprocess.run([sys.executable, "-c", "from PySide6 import QtWidgets; QtWidgets.QApplication([])"],
                               env=env, capture_output=True, text=True, timeout=120)
        if probe.returncode != 0:
            pytest.skip(f"Qt's X11 plugin does not load here (missing: {', '.join(missing_libraries()) or '?'})")
        out = subprocess.run([sys.executable, "-c", CHILD, str(SAMPLE), str(tmp_path), "2"], env=env,
                             capture_output=True, text=True, timeout=600)
    finally:
        for p in procs:
            p.terminate()
            try:
                p.wait(10)
            except subprocess.TimeoutExpired:
                p.kill()
    # a segmentation fault ends the child with -11 (and the fault handler's traceback on stderr)
    assert out.returncode == 0, f"exit {out.returncode}\n{out.stdout}\n{out.stderr[-3000:]}"
    assert "exported" in out.stdout
