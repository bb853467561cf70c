"""The desktop window (PySide6 + pyqtgraph).

:func:`launch` opens the window on runs and runs the Qt event loop; the ``open`` and ``demo``
verbs call it. Qt is imported only when the window is used, so the command line stays fast.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

SELF_CONTAINED = (".h5md", ".h5", ".hdf5")  # one file holds a whole run (frames, topology, energies)


def group_runs(paths: Sequence[str | Path]) -> list[tuple[str, ...]]:
    """Files given together, as runs: several self-contained files (H5MD, HDF5) are replicas, one run
    each; anything else (a trajectory with its topology and energy tables) is one run."""
    names = [str(p) for p in paths]
    if len(names) > 1 and all(Path(n).suffix.lower() in SELF_CONTAINED for n in names):
        return [(n,) for n in names]
    return [tuple(names)]


def launch(paths: Sequence[str | Path], *, guide: bool = False, topology: str | None = None,
           timestep_fs: float | None = None, n_constraints: int | None = None,
           temperature_K: float | None = None, session: str | Path | None = None) -> int:
    """Open the window on one run made of ``paths`` (or a saved session) and run until it closes.

    Parameters
    ----------
    paths : files of one run (trajectory, topology, energy tables), or several H5MD/HDF5 files, each a
        run of its own (replicas); may be empty
    guide : show a short guide to the window's parts (dismissible)
    topology, timestep_fs, n_constraints, temperature_K : what the files do not say
    session : a session file saved from the window (``.pwsession``) to restore instead

    Returns
    -------
    int
        The Qt event loop's exit code (0 when the window was closed normally).
    """
    import pyqtgraph as pg
    from PySide6 import QtCore, QtWidgets

    from phasewake.app.window.main import MainWindow
    from phasewake.app.window.model import RunSettings

    pg.setConfigOptions(antialias=True, background="w", foreground="k")
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication(["phasewake"])
    QtCore.QCoreApplication.setOrganizationName("phasewake")
    QtCore.QCoreApplication.setApplicationName("phasewake")
    win = MainWindow()
    win.show()
    if session is not None:
        win.load_session(session)
    elif paths:
        settings = RunSettings(timestep_fs=timestep_fs, n_constraints=n_constraints, temperature_K=temperature_K)
        win.open_runs([(group, topology, settings) for group in group_runs(paths)])
    if guide:
        win.show_guide()
    code = int(app.exec())
    if not win.jobs.wait_all(5_000):
        # A cancelled analysis still inside a long numpy call: nothing is written (inputs are read
        # only), so leave now instead of letting Qt abort on a thread destroyed while running.
        import os
        import sys

        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    return code


__all__ = ["group_runs", "launch"]
