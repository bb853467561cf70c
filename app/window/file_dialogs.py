"""File dialogs that remember their folder: each kind starts where that kind was last used.

Opening runs never starts in the folder figures were last exported to; the folders are kept in the
window's QSettings under :data:`FOLDER_KEYS`.
"""

from __future__ import annotations

from pathlib import Path

from PySide6 import QtCore, QtWidgets

FOLDER_KEYS = {"runs": "last_run_folder", "export": "last_export_folder", "session": "last_session_folder"}


class TakesDroppedFiles:
    """Files dropped on a widget (put this before the Qt class in the bases and call ``setAcceptDrops``):
    each drop of local files calls ``files_dropped(paths)``."""

    def files_dropped(self, paths: list[str]) -> None:
        raise NotImplementedError

    def dragEnterEvent(self, event):  # noqa: N802 - Qt override
        if event.mimeData().hasUrls():
            event.acceptProposedAction()

    def dropEvent(self, event):  # noqa: N802 - Qt override
        paths = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        if paths:
            self.files_dropped(paths)
            event.acceptProposedAction()


def ask_path(parent: QtWidgets.QWidget, settings: QtCore.QSettings, title: str, filters: str, *, save: bool,
             suggested: str = "", kind: str = "export") -> str:
    """A file dialog starting in the last folder used for this ``kind``; '' when the user cancels."""
    key = FOLDER_KEYS[kind]
    folder = str(settings.value(key, "") or settings.value(FOLDER_KEYS["runs"], ""))
    start = str(Path(folder) / suggested) if folder and suggested else (suggested or folder)
    if save:
        path, _ = QtWidgets.QFileDialog.getSaveFileName(parent, title, start, filters)
    else:
        path, _ = QtWidgets.QFileDialog.getOpenFileName(parent, title, folder, filters)
    if path:
        settings.setValue(key, str(Path(path).parent))
    return path
