"""The window and faults: a file that disappears while open is reported, the window stays
usable, and nothing crashes."""

import shutil
from pathlib import Path

import pytest
from PySide6 import QtCore

from phasewake.app.window.main import MainWindow

pytestmark = [pytest.mark.gui, pytest.mark.slow]
SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"


def test_file_that_disappears_while_open_is_reported(qtbot, tmp_path):
    copy = tmp_path / "vanishing.h5md"
    shutil.copy(SAMPLE, copy)
    w = MainWindow(settings=QtCore.QSettings(str(tmp_path / "s.ini"), QtCore.QSettings.Format.IniFormat))
    qtbot.addWidget(w)
    w.show()
    w.open_paths([str(copy)])
    assert w.wait_idle(90_000)
    copy.unlink()
    w.model.set_time_window((1.0, 20.0))  # every panel recomputes and must read frames again
    assert w.wait_idle(90_000)
    shown = " ".join(w.messages) + " ".join(str(p.error) for p in w.panels.values() if p.error)
    assert "vanishing.h5md" in shown, shown
    # still usable: the cursor moves and the model answers
    w.model.set_cursor_frame(5)
    assert w.model.cursor_frame == 5
