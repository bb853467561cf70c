"""Small things around the window: the start-up check, the status line, exported metadata.

- the start-up check names the X11 libraries that are really missing (not always libxcb-cursor0);
- an old problem leaves the status line;
- exported files carry their input by file name (not its absolute path) with its checksum.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from phasewake.app import qt_probe


def test_the_start_up_check_names_the_missing_libraries():
    known = {n for n in qt_probe.XCB_LIBRARIES if n not in ("xcb-icccm", "xcb-keysyms")}
    missing = qt_probe.missing_libraries(known=known, find=lambda name: None)
    assert missing == ["xcb-icccm", "xcb-keysyms"]
    # Qt's own message names libxcb-cursor0 whatever is missing; ours names what is
    qt_text = ("qt.qpa.plugin: From 6.5.0, xcb-cursor0 or libxcb-cursor0 is needed to load the Qt xcb "
               "platform plugin.\nqt.qpa.plugin: Could not load the Qt platform plugin \"xcb\"")
    line = qt_probe.xcb_problem(qt_text, missing=missing)
    assert "libxcb-icccm" in line and "libxcb-keysyms" in line and "cursor" not in line
    assert "apt install libxcb-icccm4 libxcb-keysyms1" in line
    # a library find_library sees (e.g. on LD_LIBRARY_PATH) is not called missing
    assert qt_probe.missing_libraries(["xcb-icccm"], known=set(), find=lambda n: "libxcb-icccm.so.4") == []
    # nothing missing: say so instead of blaming a library
    assert "installed" in qt_probe.xcb_problem(qt_text, missing=[])
    assert qt_probe.xcb_problem("some other failure", missing=["xcb"]) is None


def test_this_machines_libraries_are_looked_up_one_by_one():
    names = qt_probe._ldconfig_names()
    if names is None:
        pytest.skip("ldconfig is not available here")
    # libc is on every Linux machine: the lookup must find it (a lookup that finds nothing proves nothing)
    assert "c" in names
    assert qt_probe.missing_libraries(["c"]) == []


def test_exported_metadata_names_the_input_file_not_its_folder(tmp_path):
    from phasewake.core.figures.export import export_csv, export_figure, provenance_for
    from phasewake.core.figures.spec import Axis, FigureSpec, Line, PlotSpec

    folder = tmp_path / "private" / "project"
    folder.mkdir(parents=True)
    data = folder / "run.h5md"
    data.write_bytes(b"some run bytes")
    prov = provenance_for([data])
    assert prov["inputs"] == [{"file": "run.h5md", "sha256": hashlib.sha256(b"some run bytes").hexdigest(),
                               "size_bytes": 14}]
    x = np.linspace(0, 1, 20)
    spec = FigureSpec(key="k", title="t", plots=(PlotSpec(title="p", x=Axis("Time", "ps"), y=Axis("q", "nm"),
                                                          items=(Line(x, x, label="q"),)),))
    for out in (export_figure(spec, tmp_path / "f.svg", provenance=prov).path,
                export_figure(spec, tmp_path / "f.pdf", provenance=prov).path,
                export_csv(spec, tmp_path / "f.csv", provenance=prov)):
        raw = out.read_bytes()
        assert str(folder).encode() not in raw, out  # no absolute path anywhere in the file
        assert hashlib.sha256(b"some run bytes").hexdigest().encode() in raw or out.suffix == ".pdf"
    text = (tmp_path / "f.csv").read_text()
    meta = json.loads(text.split("# provenance: ", 1)[1].splitlines()[0])
    assert meta["inputs"][0]["file"] == "run.h5md"


def test_an_old_problem_leaves_the_status_line(qtbot, tmp_path, monkeypatch):
    pytest.importorskip("pytestqt")
    from PySide6 import QtCore

    from phasewake.app.window import main as main_module

    monkeypatch.setattr(main_module, "PROBLEM_SHOWN_MS", 200)
    w = main_module.MainWindow(settings=QtCore.QSettings(str(tmp_path / "s.ini"), QtCore.QSettings.Format.IniFormat))
    qtbot.addWidget(w)
    w.show_problem("Could not open files", "bad.h5md: not an HDF5 file")
    assert "bad.h5md" in w.status_label.text()
    qtbot.waitUntil(lambda: "bad.h5md" not in w.status_label.text(), timeout=3000)
    assert w.status_label.text().startswith("Open run files")
    w.show_problem("Could not open files", "bad.h5md: not an HDF5 file")
    w.say("Opened good.h5md.")  # news replaces the problem at once
    assert w.status_label.text() == "Opened good.h5md." and not w._problem_timer.isActive()
    assert w.messages == ["bad.h5md: not an HDF5 file"] * 2  # the boxes keep the whole text
