"""Guard against the PySide6 6.12.0 + CPython 3.11 crash.

Every void Qt call in that release drops one reference to None; after enough calls Python aborts.
We make ~1e5 void calls and check that None's reference count did not fall. An upgrade that brings
the bug back fails here instead of crashing a user's window.
"""

import sys

import pytest


@pytest.mark.gui
def test_void_qt_calls_keep_none_refcount():
    from PySide6 import QtGui

    path = QtGui.QPainterPath()
    before = sys.getrefcount(None)
    for _ in range(100_000):
        path.moveTo(0.0, 0.0)
    after = sys.getrefcount(None)
    assert after >= before - 100, (before, after)
