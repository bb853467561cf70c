"""Window tests leave no window behind: a widget closed with ``deleteLater`` (pytest-qt's teardown does
that) is otherwise torn down during whichever event loop runs next, in a later test, and tearing down a
window's plots runs Python for every graphics item; that stalled a later test's event loop for up to half
a second (the responsiveness test in test_window_parts.py measured 1-5 ticks of 21-26)."""

import sys

import pytest


@pytest.fixture(autouse=True)
def _delete_closed_widgets_now():
    yield
    if "PySide6.QtWidgets" not in sys.modules:
        return
    from PySide6 import QtCore, QtWidgets

    if QtWidgets.QApplication.instance() is None:
        return
    # after pytest-qt's teardown closed its widgets and called deleteLater on them (it runs first)
    for _ in range(4):  # a deletion can post more (pyqtgraph deletes its scene later)
        QtCore.QCoreApplication.sendPostedEvents(None, QtCore.QEvent.Type.DeferredDelete.value)
