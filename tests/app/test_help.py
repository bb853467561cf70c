"""Help menu: the short guide, the user guide and the About box open and close offscreen; the guide
shows itself on the first start and for `phasewake demo` (launch(guide=True)).

Outside references: the licences and versions are compared with what importlib.metadata reports for
the installed packages; the coordinate functions and file suffixes with the parser's and the
readers' own tables.
"""

from importlib import metadata

import pytest
from PySide6 import QtCore, QtWidgets

from phasewake.app.window import guide_text, launch
from phasewake.app.window import help as help_dialogs
from phasewake.app.window.main import MainWindow


def _settings(tmp_path):
    return QtCore.QSettings(str(tmp_path / "s.ini"), QtCore.QSettings.Format.IniFormat)


@pytest.fixture()
def window(qtbot, tmp_path):
    w = MainWindow(settings=_settings(tmp_path))
    qtbot.addWidget(w)
    w.show()
    return w


def _help_action(window, text):
    menu = next(a.menu() for a in window.menuBar().actions() if a.text() == "&Help")
    return next(a for a in menu.actions() if a.text() == text)


@pytest.mark.parametrize("entry, attr, words", [
    ("User guide", "user_guide", ("coordinate specification", "File formats read", "Units", "heuristics")),
    ("Short guide", "guide", ("Runs", "Time ruler", "Landscape")),
    ("About phasewake", "about_box", ("Dependencies and their licences", "How to cite", "Flyvbjerg")),
])
def test_help_dialogs_open_and_close(window, qtbot, entry, attr, words):
    _help_action(window, entry).trigger()
    dlg = getattr(window, attr)
    qtbot.waitUntil(dlg.isVisible, timeout=2000)
    text = dlg.browser.toPlainText()
    for w in words:
        assert w in text, (entry, w)
    dlg.close_button.click()
    qtbot.waitUntil(lambda: not dlg.isVisible(), timeout=2000)
    assert window.isVisible()  # closing help leaves the window as it was


def test_user_guide_lists_every_coordinate_function_and_format():
    from phasewake.core.analyses.coordspec import FUNCTIONS
    from phasewake.core.readers import READERS

    text = guide_text.user_guide_html()
    for name in FUNCTIONS:
        assert f"<code>{name}(" in text, name
    for reader in READERS:
        for suffix in reader.suffixes:
            assert suffix in text, suffix
    for unit in ("nm", "ps", "amu", "kJ/mol", "K", "nm/ps"):
        assert unit in text


def test_about_states_version_and_licences_from_package_metadata():
    from phasewake.core import __version__

    deps = help_dialogs.dependency_licences()
    names = {d.name.lower() for d in deps}
    assert {"numpy", "scipy", "mdtraj", "h5py", "matplotlib", "pyqtgraph"} <= names
    for d in deps:
        md = metadata.metadata(d.name)  # importlib.metadata: what the installed package says
        assert d.version == metadata.version(d.name)
        if d.field == "License-Expression":
            assert d.licence == md["License-Expression"]
        elif d.field == "License":
            assert d.licence.split(" (see")[0] in md["License"]
        elif d.field == "classifier":
            assert any(d.licence.split("; ")[0] in c for c in md.get_all("Classifier"))
    about = help_dialogs.about_html()
    assert f"phasewake {__version__}" in about
    # the papers cited beside the code
    for author in ("Tuckerman", "Flyvbjerg", "Sokal", "Geyer", "Chodera", "Vehtari", "Kramers", "Bennett",
                   "Chandler", "Buchete", "Hess", "Halko", "Amadei", "Karplus", "Yeh", "Thirumalai", "Okabe",
                   "de Buyl"):
        assert author in about, author


def test_licence_of_a_missing_package_says_so():
    assert help_dialogs.licence_of("no-such-package-phasewake-test").licence == "not installed"


def test_first_start_shows_the_guide_once(qapp, tmp_path):
    shown = []

    def check_and_quit():
        shown.append([w for w in QtWidgets.QApplication.topLevelWidgets()
                      if w.isVisible() and w.windowTitle() == "phasewake: a short guide"])
        for w in QtWidgets.QApplication.topLevelWidgets():
            w.close()
        qapp.quit()

    for _ in range(2):
        QtCore.QTimer.singleShot(300, check_and_quit)
        assert launch([], settings=_settings(tmp_path)) == 0
    assert len(shown[0]) == 1 and shown[1] == []  # first start: guide; second start: none
    # `phasewake demo` asks for the guide every time
    QtCore.QTimer.singleShot(300, check_and_quit)
    assert launch([], guide=True, settings=_settings(tmp_path)) == 0
    assert len(shown[2]) == 1
