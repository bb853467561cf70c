"""The desktop window on the sample run (pytest-qt, offscreen).

Checks from the window issue: open the sample run; each panel draws non-empty data; the cursor moved
in one panel moves in every other (through the shared model); selecting an event row moves the
cursor to that event's time; a long computation keeps the event loop responsive and can be
cancelled; a bad file shows a message and leaves the window usable; save then reopen reproduces the
state. These are checks of the window's mechanics: the science of each analysis is tested with the
analysis itself (tests/core).
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")
from PySide6 import QtCore, QtGui  # noqa: E402

from phasewake.app.window import analyses  # noqa: E402
from phasewake.app.window.analyses import PANELS  # noqa: E402
from phasewake.app.window.main import MainWindow, delete_now  # noqa: E402
from phasewake.core.progress import Progress  # noqa: E402
from tests.app.test_window_parts import idle_ticks  # noqa: E402

pytestmark = [pytest.mark.gui, pytest.mark.slow]  # opening the sample computes every panel (seconds)
SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"


@pytest.fixture(scope="module")
def sample_path(tmp_path_factory) -> Path:
    """The bundled sample run, or (until it is committed) a small H5MD run of the same shape."""
    if SAMPLE.exists():
        return SAMPLE
    from phasewake.core.readers.h5md import write_h5md

    # A dimer (atoms 0, 1) whose bond switches between 0.37 and 0.55 nm a few times, in 6 still atoms.
    n, dt = 900, 0.05
    t = np.arange(n) * dt
    r = 0.46 + 0.09 * np.tanh(3.0 * np.sin(2 * np.pi * t / 12.0)) + 0.01 * np.sin(2 * np.pi * t / 0.6)
    drdt = np.gradient(r, t)
    pos = np.zeros((n, 8, 3), np.float32)
    vel = np.zeros((n, 8, 3), np.float32)
    pos[:, 0, 0] = 1.0
    pos[:, 1, 0] = 1.0 + r
    vel[:, 1, 0] = drdt
    pos[:, 2:, :] = np.arange(6)[:, None] * 0.5 + 2.0
    ke = 20.0 + 2.0 * np.sin(t)
    pe = -60.0 - 2.0 * np.sin(t)
    path = tmp_path_factory.mktemp("sample") / "dimer_like.h5md"
    write_h5md(path, positions_nm=pos, time_ps=t, velocities_nm_per_ps=vel, masses_amu=np.full(8, 39.948),
               species=["Ar"] * 8, box_nm=np.array([5.0, 5.0, 5.0]),
               observables={"kinetic_energy": (ke, "kJ mol-1"), "potential_energy": (pe, "kJ mol-1"),
                            "total_energy": (ke + pe, "kJ mol-1"), "temperature": (120 + 10 * np.sin(t), "K")},
               parameters={"timestep_ps": 0.002, "ensemble": "NVE", "temperature_K": 120.0, "n_constraints": 0})
    return path


def _window(qtbot, tmp_path) -> MainWindow:
    settings = QtCore.QSettings(str(tmp_path / "settings.ini"), QtCore.QSettings.Format.IniFormat)
    w = MainWindow(settings=settings)
    qtbot.addWidget(w)
    w.resize(1200, 800)
    w.show()
    return w


@pytest.fixture(scope="module")
def opened(qapp, tmp_path_factory, sample_path):
    """One window on the sample run, shared by the tests of this module (opening computes every panel)."""
    folder = tmp_path_factory.mktemp("window")
    w = MainWindow(settings=QtCore.QSettings(str(folder / "settings.ini"), QtCore.QSettings.Format.IniFormat))
    w.resize(1200, 800)
    w.show()
    w.open_paths([str(sample_path)])
    assert w.wait_idle(60_000), "background work did not finish"
    assert not w.messages, w.messages
    yield w
    delete_now(w)  # now, not during a later test's event loop


@pytest.fixture()
def win(opened):
    """The shared window, back on the whole run with the cursor at frame 0."""
    opened.model.set_time_window(None)
    opened.model.set_cursor_frame(0)
    assert opened.wait_idle(60_000)
    return opened


def _drawn_points(panel) -> int:
    n = 0
    for rp in panel.view.plots:
        for item in rp.items:
            if hasattr(item, "getOriginalDataset"):
                x, _ = item.getOriginalDataset()
                n += 0 if x is None else len(x)
            elif hasattr(item, "image") and item.image is not None:
                n += int(np.isfinite(item.image).sum())
            elif hasattr(item, "opts") and "height" in item.opts:
                n += len(item.opts["height"])
    return n


def test_open_sample_every_panel_draws_data(win):
    w = win
    assert len(w.model.entries) == 1 and w.model.current is not None
    assert w.model.coordinate  # a default coordinate was chosen for the phase portrait
    for name in PANELS:
        panel = w.panels[name]
        assert panel.view.spec is not None, f"{name}: {panel.view.message.text()}"
        assert _drawn_points(panel) > 0, name
    # principal components join the Phase space panel
    keys = [f.key for f in w.panels["Phase space"].result.figures]
    assert "phase.pca_variance" in keys, keys
    # the sample's solute is the dimer: two atoms have no shape, so the components are of the whole system,
    # and the caption says which atoms and why
    cap = next(f.caption for f in w.panels["Phase space"].result.figures if f.key == "phase.pca_variance")
    assert "all atoms 0–53 (54 atoms)" in cap and "atoms 0 and 1" in cap, cap
    energy = w.panels["Energy"]
    assert energy.result.verdicts, "the audit's verdicts are shown on the Energy panel"
    assert any(word in energy.notes_text() for word in ("ok", "caution", "problem"))


def test_cursor_is_shared_by_every_panel_and_the_ruler(win, qtbot):
    w = win
    energy = w.panels["Energy"]
    line = energy.view.time_plots[0].cursor
    t = w.model.time_ps
    target = float(t[t.size // 3])
    line.setValue(target)  # what dragging the cursor line does
    assert w.model.cursor_time_ps == pytest.approx(target)
    frame = w.model.cursor_frame
    for name in PANELS:
        for rp in w.panels[name].view.time_plots:
            assert rp.cursor.value() == pytest.approx(target), name
    assert w.ruler.cursor_line.value() == pytest.approx(target)
    # the phase portrait marks the cursor's frame
    phase = w.panels["Phase space"]
    tr = phase.current_trace()
    assert tr is not None
    mx, my = phase._marker.getData()
    i = int(np.searchsorted(tr.time_ps, w.model.cursor_time_ps))
    assert (mx[0], my[0]) == (pytest.approx(tr.x[i]), pytest.approx(tr.y[i]))
    # keyboard: step, jump to the ends
    qtbot.keyClick(w, QtCore.Qt.Key.Key_Right)
    assert w.model.cursor_frame == frame + 1
    qtbot.keyClick(w, QtCore.Qt.Key.Key_End)
    assert w.model.cursor_frame == t.size - 1
    qtbot.keyClick(w, QtCore.Qt.Key.Key_Home)
    assert w.model.cursor_frame == 0
    qtbot.keyClick(w, QtCore.Qt.Key.Key_PageDown)
    assert w.model.cursor_frame == max(1, t.size // 20)


def test_selecting_an_event_moves_the_cursor_there(win, qtbot):
    w = win
    cross = w.panels["Crossings"]
    events = cross.visible_events()
    assert events, cross.view.message.text()
    pick = events[len(events) // 2]
    row = events.index(pick)
    w.tabs.setCurrentWidget(cross)
    cross.select_event(row)
    t = w.model.time_ps
    spacing = float(np.median(np.diff(t)))
    assert abs(w.model.cursor_time_ps - pick.time_ps) <= 0.5 * spacing + 1e-9
    assert w.model.choice("highlight_ps") == (pick.start_ps, pick.end_ps)
    assert w.panels["Phase space"].highlighted_points() > 0  # the crossing's segment is drawn in the portrait
    # a transition highlights its whole transition path: from leaving one core to entering the other
    res = cross.result.info["crossings"]
    assert any(e.kind == "transition" for e in events)
    for e in events:
        if e.kind == "transition":
            path = res.paths[int(res.events[e.index]["path"])]
            assert (e.start_ps, e.end_ps) == (float(path["exit_time_ps"]), float(path["entry_time_ps"]))
            assert e.start_ps <= e.time_ps <= e.end_ps
    cross.filter.setCurrentIndex(cross.filter.findData("recrossing"))
    assert all(e.kind == "recrossing" for e in cross.visible_events())


def test_time_window_restricts_the_panels(win):
    w = win
    t = w.model.time_ps
    lo, hi = float(t[t.size // 4]), float(t[3 * t.size // 4])
    w.ruler.region.setRegion((lo, hi))  # what dragging the band on the ruler does
    w.ruler._region_dragged(w.ruler.region)
    assert w.model.time_window_ps == (pytest.approx(lo), pytest.approx(hi))
    assert w.wait_idle(60_000)
    rp = w.panels["Energy"].view.time_plots[0]
    (x0, x1), _ = rp.data_bounds()
    assert x0 >= lo - 1e-9 and x1 <= hi + 1e-9
    tr = w.panels["Phase space"].current_trace()
    assert tr.time_ps[0] >= lo - 1e-9 and tr.time_ps[-1] <= hi + 1e-9


def test_long_computation_keeps_window_responsive_and_cancels(win, qtbot, monkeypatch):
    w = win

    def slow(ctx):
        for i in range(2000):  # 20 s if left alone
            time.sleep(0.01)
            yield Progress(i, 2000, "slow work")
        return analyses.PanelResult(message="finished")

    monkeypatch.setitem(analyses.PANEL_JOBS, "Correlation", slow)
    baseline = idle_ticks(qtbot, 400)
    ticks = []
    timer = QtCore.QTimer()
    timer.timeout.connect(lambda: ticks.append(1))
    timer.start(20)
    w.schedule_recompute(["Correlation"])
    qtbot.waitUntil(lambda: "Correlation" in w.jobs.running(), timeout=3000)
    qtbot.wait(400)
    assert w.cancel_button.isVisible() and w.progress.isVisible()
    t0 = time.monotonic()
    qtbot.mouseClick(w.cancel_button, QtCore.Qt.MouseButton.LeftButton)
    assert w.jobs.wait_all(3000)
    qtbot.wait(50)
    timer.stop()
    # the GUI thread kept ticking while the job ran (a frozen loop would tick 0-1 times)
    assert len(ticks) >= max(3, 0.5 * baseline), (len(ticks), baseline)
    assert time.monotonic() - t0 < 2.0
    panel = w.panels["Correlation"]
    assert "cancelled" in panel.view.message.text() or "cancelled" in panel.notes_text()
    assert not w.jobs.busy


@pytest.mark.slow  # worker processes: ~1 s of CPU
def test_a_pass_over_two_workers_shows_their_merged_progress_and_cancel_stops_them(win, qtbot, monkeypatch,
                                                                                  tmp_path):
    import multiprocessing

    from phasewake.core.model import parallel
    from phasewake.core.readers import open_run
    from phasewake.core.settings import chunking
    from tests.core.test_parallel import make_xtc
    from tests.parallel_consumers import FrameSums

    w = win
    xtc, pdb = make_xtc(tmp_path, n_frames=400)
    run = open_run([xtc], topology=pdb)

    def over_workers(ctx):
        with chunking(frames=4):  # 100 chunks of 0.05 s: 5 s serially, 2.5 s over two workers
            yield from parallel.ranges_pass(run, {"s": FrameSums(pause_s=0.05)}, workers=2)
        return analyses.PanelResult(message="finished")

    monkeypatch.setitem(analyses.PANEL_JOBS, "Correlation", over_workers)
    w.schedule_recompute(["Correlation"])
    qtbot.waitUntil(lambda: "Correlation" in w.jobs.running(), timeout=3000)
    # the bar moves with the frames done in both workers together (never the indefinite busy bar only)
    qtbot.waitUntil(lambda: w.progress.maximum() == 1000 and 0 < w.progress.value() < 1000, timeout=20_000)
    workers = multiprocessing.active_children()
    assert len(workers) >= 2
    qtbot.mouseClick(w.cancel_button, QtCore.Qt.MouseButton.LeftButton)
    assert w.jobs.wait_all(20_000)
    panel = w.panels["Correlation"]
    assert "cancelled" in panel.view.message.text() or "cancelled" in panel.notes_text()
    assert not [p for p in workers if p.is_alive()]


def test_bad_file_shows_a_message_and_window_stays_usable(qtbot, tmp_path, sample_path):
    w = _window(qtbot, tmp_path)
    bad = tmp_path / "broken.h5md"
    bad.write_bytes(b"\x89HDF\r\n\x1a\n" + b"not really hdf5" * 10)
    w.open_paths([str(bad)])
    assert w.wait_idle(20_000)
    assert w.messages and "broken.h5md" in w.messages[-1]
    assert w.message_box is not None and w.message_box.isVisible() and not w.message_box.isModal()
    assert w.model.entries == []
    w.message_box.close()
    w.open_paths([str(sample_path)])  # still works afterwards
    qtbot.waitUntil(lambda: w.panels["Energy"].view.spec is not None, timeout=60_000)
    assert len(w.model.entries) == 1
    w.cancel_work()
    assert w.jobs.wait_all(20_000)


def test_analysis_error_is_shown_in_its_panel(win, monkeypatch):
    w = win

    def broken(ctx):
        yield Progress(0, 1)
        raise ValueError("something inside went wrong")

    monkeypatch.setitem(analyses.PANEL_JOBS, "Landscape", broken)
    w.schedule_recompute(["Landscape"])
    assert w.wait_idle(20_000)
    text = w.panels["Landscape"].view.message.text()
    assert "could not run" in text and "something inside went wrong" in text
    w.model.step_cursor(3)  # the window is still usable
    assert w.model.cursor_frame == 3


def test_save_then_reopen_reproduces_the_state(win, qtbot, tmp_path):
    w = win
    t = w.model.time_ps
    w.model.set_time_window((float(t[10]), float(t[-10])))
    w.model.set_cursor_frame(42)
    w.model.set_choice("trail_frames", 0)
    w.tabs.setCurrentIndex(PANELS.index("Crossings"))
    assert w.wait_idle(60_000)
    path = w.save_session(tmp_path / "state.pwsession")
    assert path.exists()
    w2 = _window(qtbot, tmp_path)
    w2.load_session(path)
    # the state is restored once the runs are open; the panels then compute in the background
    qtbot.waitUntil(lambda: w2.model.current is not None and w2.model.cursor_frame == 42, timeout=60_000)
    w2.cancel_work()
    assert [e.paths for e in w2.model.entries] == [tuple(str(Path(p).resolve()) for p in w.model.entries[0].paths)]
    assert w2.model.time_window_ps == pytest.approx(w.model.time_window_ps)
    assert w2.model.cursor_frame == 42
    assert w2.model.coordinate == w.model.coordinate
    assert w2.model.choice("trail_frames") == 0
    assert w2.tabs.tabText(w2.tabs.currentIndex()) == "Crossings"


def test_exports_write_what_the_panel_shows(win, tmp_path):
    w = win
    w.tabs.setCurrentIndex(PANELS.index("Energy"))
    png = w.export_figure_to(tmp_path / "energy.png", preset="single", dpi=100)
    assert w.wait_idle(30_000)  # exports run as background jobs
    assert png.exists(), (w.messages, w.status_label.text())
    img = QtGui.QImage(str(png))
    assert not img.isNull() and img.width() == pytest.approx(8.5 / 2.54 * 100, abs=2)  # 8.5 cm at 100 dpi
    csv = w.export_data_to(tmp_path / "energy.csv")
    assert w.wait_idle(30_000)
    text = csv.read_text()
    assert "ps" in text and "kJ/mol" in text


def test_open_verb_refuses_missing_files(capsys):
    from phasewake.app.cli import main

    assert main(["open", "definitely-missing.h5md"]) == 2
    err = capsys.readouterr().err
    assert "definitely-missing.h5md" in err and "Traceback" not in err


def test_dragging_the_dividing_surface_redefines_the_crossings(win, qtbot):
    w = win
    land = w.panels["Landscape"]
    w.tabs.setCurrentWidget(land)
    marks = [(m, item) for rp in land.view.plots for m, item in rp.movable_marks]
    roles = {m.role for m, _ in marks}
    assert {"state", "surface"} <= roles, roles
    a = next(item for m, item in marks if m.role == "state" and m.label == "A")
    b = next(item for m, item in marks if m.role == "state" and m.label == "B")
    surf = next(item for m, item in marks if m.role == "surface")
    new = 0.5 * (a.value() + surf.value())  # move the surface half-way towards core A
    surf.setValue(new)
    surf.sigPositionChangeFinished.emit(surf)  # what releasing the mouse after a drag does
    assert w.model.choice("landscape_marks")["surface:dividing surface"] == [pytest.approx(new)]
    assert w.wait_idle(60_000)
    res = w.panels["Crossings"].result.info["crossings"]
    assert res.settings.surface == pytest.approx(new)
    assert res.settings.states_source == "given"
    assert (res.settings.a_hi, res.settings.b_lo) == (pytest.approx(a.value()), pytest.approx(b.value()))
    w.model.set_choice("landscape_marks", {})  # back to the suggested states for the other tests
    assert w.wait_idle(60_000)


def test_runs_list_settings_remove_and_drop(win, qtbot, sample_path):
    w = win
    runs = w.runs
    runs.settings.timestep.setValue(1.5)
    runs.settings.temperature.setValue(130.0)
    qtbot.mouseClick(runs.settings.apply, QtCore.Qt.MouseButton.LeftButton)
    md = w.model.current.run.metadata
    assert md.timestep_ps == pytest.approx(1.5e-3) and md.temperature_K == pytest.approx(130.0)
    shown = {runs.details.item(r, 0).text(): runs.details.item(r, 1).text() for r in range(runs.details.rowCount())}
    assert shown["time step"] == "1.5 fs" and shown["target temperature"] == "130 K (yours)"
    assert shown["kinetic temperature"].endswith("degrees of freedom)") and " K " in shown["kinetic temperature"]
    assert shown["velocities"] in ("stored", "estimated from positions")
    # dropping a file on the list asks the window to open it as another run
    mime = QtCore.QMimeData()
    mime.setUrls([QtCore.QUrl.fromLocalFile(str(sample_path))])
    drop = QtGui.QDropEvent(QtCore.QPointF(10, 10), QtCore.Qt.DropAction.CopyAction, mime,
                            QtCore.Qt.MouseButton.LeftButton, QtCore.Qt.KeyboardModifier.NoModifier)
    runs.dropEvent(drop)
    assert w.wait_idle(60_000)
    assert len(w.model.entries) == 2 and runs.list.count() == 2
    # the second copy was opened without the time step and temperature stated for the first: not a
    # replica of it, and the Sampling panel says why instead of pooling them
    sampling = w.panels["Sampling"]
    titles = [v.title for v in sampling.result.verdicts]
    assert not any("across" in t for t in titles), titles
    assert "Not pooled as replicas: dimer_nve (target temperature not stated, not 130 K)" in sampling.notes_text()
    # the same settings on both: now they are replicas, pooled and named
    w.model.update_settings(1, w.model.entries[0].settings)
    assert w.wait_idle(60_000)
    titles = [v.title for v in sampling.result.verdicts]
    assert any("across 2 replicas" in t for t in titles), titles
    assert "Pooled as replicas" in sampling.notes_text()
    runs.list.setCurrentRow(1)
    runs.remove_selected()
    assert len(w.model.entries) == 1 and w.model.current is not None
    w.model.update_settings(0, type(w.model.current.settings)())  # restore
    assert w.wait_idle(60_000)


def test_coordinate_builder_writes_and_checks_specs(win, qtbot):
    from phasewake.app.window.builder import CoordinateBuilder

    run = win.model.current.run
    dlg = CoordinateBuilder(run, "")
    qtbot.addWidget(dlg)
    ok = dlg.buttons.button(dlg.buttons.StandardButton.Ok)
    assert not ok.isEnabled()  # nothing typed yet
    dlg.kind.setCurrentIndex(0)  # distance: two atoms
    dlg.pick_row(0)
    dlg.pick_row(1)
    assert dlg.spec == "distance(0, 1)" and ok.isEnabled()
    dlg.text.setText("distance(0, 1")  # a typing mistake is pointed at, and cannot be accepted
    assert not ok.isEnabled() and "^" in dlg.error.text()
    dlg.text.setText(f"distance(0, {run.n_atoms + 5})")  # atom out of range for this run
    assert not ok.isEnabled() and dlg.error.text()
    if run.topology is not None:
        dlg.filter.setText(run.topology.atom(1).name)
        visible = [r for r in range(dlg.table.rowCount()) if not dlg.table.isRowHidden(r)]
        assert 1 in visible and len(visible) < dlg.table.rowCount()


def test_second_coordinate_adds_pair_and_poincare_section(win):
    w = win
    w.model.set_choice("coordinate2", "distance(0, 2)")
    assert w.wait_idle(60_000)
    phase = w.panels["Phase space"]
    keys = [f.key for f in phase.result.figures]
    assert "phase.pair" in keys and "phase.poincare_pair" in keys, keys
    phase.chooser.setCurrentIndex(keys.index("phase.pair"))
    assert phase.current_trace() is not None and _drawn_points(phase) > 0  # the cursor is marked here too
    phase.chooser.setCurrentIndex(keys.index("phase.poincare_pair"))
    assert _drawn_points(phase) > 0
    w.model.set_choice("coordinate2", "")
    phase.chooser.setCurrentIndex(0)
    assert w.wait_idle(60_000)


def test_export_menu_remembers_the_last_folder(win, tmp_path, monkeypatch):
    from PySide6 import QtWidgets

    from phasewake.app.window import main as main_module

    w = win
    w.tabs.setCurrentIndex(PANELS.index("Energy"))
    out = tmp_path / "figs" / "energy.svg"
    out.parent.mkdir()
    asked = []

    def fake_save(parent, title, start, filters):
        asked.append(start)
        return str(out), filters

    monkeypatch.setattr(QtWidgets.QFileDialog, "getSaveFileName", staticmethod(fake_save))
    monkeypatch.setattr(main_module.ExportDialog, "exec", lambda self: QtWidgets.QDialog.DialogCode.Accepted)
    monkeypatch.setattr(main_module.ExportDialog, "values", lambda self: ("svg", "single", 150.0))
    w.ask_export_figure()
    assert w.wait_idle(30_000)  # exports run as background jobs
    assert out.exists() and "<svg" in out.read_text()[:2000]
    assert w.settings.value("last_export_folder") == str(out.parent)
    w.ask_export_data()  # the next dialog starts in that folder
    assert asked[-1].startswith(str(out.parent))
    assert w.wait_idle(30_000)
    # ...but the Open dialog starts where a run was last opened from, not in the export folder
    opened_in = []
    monkeypatch.setattr(QtWidgets.QFileDialog, "getOpenFileNames",
                        staticmethod(lambda parent, title, start, filters: (opened_in.append(start), ([], ""))[1]))
    w.runs.ask_for_files()
    assert opened_in == [str(Path(w.model.current.paths[0]).resolve().parent)]


def test_result_cache_can_be_turned_off_and_cleared_from_the_menu(qtbot, tmp_path, monkeypatch):
    """Analysis > Use the result cache is remembered in the settings and switches the panels' cache off;
    Analysis > Clear the result cache empties the cache folder (the input files are untouched)."""
    from phasewake.app.window import analyses
    from phasewake.core.store.cache import ResultCache

    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.setattr(analyses, "USE_CACHE", True)
    ResultCache().put("a" * 32, {"x": np.zeros(3)}, {"analysis": "audit"})
    w = _window(qtbot, tmp_path)
    assert w.act_use_cache.isChecked() and analyses.USE_CACHE
    assert analyses.window_cache().enabled
    w.act_use_cache.trigger()  # off
    assert not analyses.USE_CACHE and not analyses.window_cache().enabled
    assert str(w.settings.value("use_result_cache")).lower() in ("false", "0")
    w2 = _window(qtbot, tmp_path)  # a new window with the same settings starts with the cache off
    assert not w2.act_use_cache.isChecked()
    w2.clear_cache()
    assert ResultCache().info().entries == 0 and "Removed 1 stored result" in w2.status_label.text()


def test_worker_processes_are_a_remembered_window_setting(qtbot, tmp_path, monkeypatch):
    """Analysis > Worker processes sets how many processes decode frames (as --workers does on the command
    line), is remembered, and 0 goes back to the automatic choice."""
    from PySide6 import QtWidgets

    from phasewake.core.model import parallel

    monkeypatch.setattr(parallel, "_workers", None)
    monkeypatch.setattr(QtWidgets.QInputDialog, "getInt", staticmethod(lambda *a, **k: (2, True)))
    w = _window(qtbot, tmp_path)
    w.ask_frame_workers()
    assert parallel._workers == 2 and int(w.settings.value("frame_workers")) == 2
    assert "2 worker processes" in w.status_label.text()
    parallel.set_workers(None)
    _window(qtbot, tmp_path)  # a new window with the same settings applies the remembered number
    assert parallel._workers == 2
    w.set_frame_workers(0)
    assert parallel._workers is None and int(w.settings.value("frame_workers")) == 0


@pytest.mark.slow
def test_opening_a_run_reads_the_frames_once_for_audit_coordinate_and_pca(qtbot, tmp_path, monkeypatch,
                                                                          h5md_reads):
    """With the result cache on, the window reads the frames once for the audit, the coordinate and the
    principal components (then the PCA's projections) before the panels start, and those panels find their
    results in the cache: fewer reads than with the cache off, and the same numbers on screen."""
    import shutil

    from phasewake.app.window import analyses

    reads = h5md_reads
    monkeypatch.setenv("PHASEWAKE_CACHE_DIR", str(tmp_path / "cache"))
    path = tmp_path / SAMPLE.name
    shutil.copyfile(SAMPLE, path)

    def open_once(use_cache: bool):
        folder = tmp_path / ("on" if use_cache else "off")
        settings = QtCore.QSettings(str(folder / "settings.ini"), QtCore.QSettings.Format.IniFormat)
        settings.setValue("use_result_cache", use_cache)  # the window takes Use the result cache from here
        settings.sync()
        analyses._CACHE.clear()  # the in-memory coordinate cache
        reads["n"] = 0
        w = _window(qtbot, folder)
        assert analyses.USE_CACHE is use_cache
        w.open_paths([str(path)])
        assert w.wait_idle(90_000) and not w.messages, w.messages
        shown = {name: [(v.kind, v.level, v.measured) for v in (p.result.verdicts if p.result else ())]
                 for name, p in w.panels.items()}
        w.close()
        return reads["n"], shown

    (tmp_path / "on").mkdir()
    (tmp_path / "off").mkdir()
    n_off, shown_off = open_once(False)
    n_on, shown_on = open_once(True)
    assert n_on < n_off, (n_on, n_off)
    assert shown_on == shown_off
    monkeypatch.setattr(analyses, "USE_CACHE", True)  # leave the module as the other tests expect it


def test_crossings_panel_shows_the_rates_the_command_line_prints(win, capsys):
    """The rates with their intervals, kappa and the TST rates are on screen, from the same crossings result
    (same coordinate, states and surface) the ``crossings`` verb prints."""
    import re

    from phasewake.app.cli import main

    w = win
    panel = w.panels["Crossings"]
    res = panel.result.info["crossings"]
    text = panel.rates_text()
    for needle in ("k(A→B)", "k(B→A)", "95% interval", "κ, transmission coefficient", "k_TST(A→B)", "k/k_TST"):
        assert needle in text, (needle, text)
    assert panel.lower.tabText(0) == "Rates and checks" and panel.notes.parent() is not None
    cs = res.settings
    capsys.readouterr()
    path = w.model.current.paths[0]
    # exit 1 when a verdict says caution or problem (the verb's convention), 0 otherwise: both print the rates
    assert main(["crossings", path, "--coordinate", w.model.coordinate, "--states", f"{cs.a_hi!r},{cs.b_lo!r}",
                 "--surface", repr(cs.surface)]) in (0, 1)
    out = capsys.readouterr().out
    for direction, rate in (("A->B", res.rate_ab), ("B->A", res.rate_ba)):
        printed = float(re.search(rf"k\({direction}\) = ([0-9.eE+-]+)", out).group(1))
        assert printed == pytest.approx(rate.rate_per_ps, rel=1e-3), (direction, printed, rate.rate_per_ps)
        shown = re.search(rf"k\({direction.replace('->', '→')}\)\s*([0-9.eE+-]+) ps⁻¹", text).group(1)
        assert float(shown) == pytest.approx(printed, rel=5e-3)


def test_apply_thermostat_settings_changes_the_audit(win, qtbot):
    """Stating the ensemble, thermostat and its temperature in the Runs list reaches the audit: the caption
    no longer calls the run unthermostatted and the verdicts are those of a thermostatted run."""
    w = win
    energy = w.panels["Energy"]
    before = energy.result.info["audit"]
    caption_before = " ".join(f.caption for f in energy.result.figures)
    assert not before.thermostatted and "unthermostatted" in caption_before
    form = w.runs.settings
    form.ensemble.setCurrentIndex(form.ensemble.findData("NVT"))
    form.thermostat.setCurrentIndex(form.thermostat.findData("langevin"))
    form.temperature.setValue(120.0)
    qtbot.mouseClick(form.apply, QtCore.Qt.MouseButton.LeftButton)
    assert w.wait_idle(60_000)
    after = energy.result.info["audit"]
    caption_after = " ".join(f.caption for f in energy.result.figures)
    assert after.thermostatted and after.ensemble == "NVT"
    assert "unthermostatted" not in caption_after
    assert [v.message for v in after.verdicts] != [v.message for v in before.verdicts]
    w.model.update_settings(0, type(w.model.current.settings)())  # back to the files' values
    assert w.wait_idle(60_000)
    assert not energy.result.info["audit"].thermostatted


def test_everything_is_usable_at_laptop_size(win, qtbot):
    """1024 x 640: the window is not wider than that, the Crossings figure keeps its height beside the rates
    and events, and the Runs column gives way."""
    w = win
    w.resize(1024, 640)
    qtbot.wait(200)
    assert w.minimumSizeHint().width() <= 1024 and w.width() == 1024
    cross = w.panels["Crossings"]
    w.tabs.setCurrentWidget(cross)
    qtbot.wait(200)
    assert cross.view.height() >= 150 and cross.view.height() >= cross.lower.height()
    assert w.runs_dock.width() <= 200
    assert w.act_runs_list.isChecked()
    w.act_runs_list.trigger()  # F9: the Runs column collapses for more room
    qtbot.wait(100)
    assert not w.runs_dock.isVisible()
    w.act_runs_list.trigger()
    w.resize(1200, 800)
    qtbot.wait(100)
