"""The desktop window (PySide6 + pyqtgraph).

:func:`launch` opens the window on runs and runs the Qt event loop; the ``open`` and ``demo``
verbs call it. Qt is imported only when the window is used, so the command line stays fast.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from phasewake.app.window.run_groups import group_runs


def launch(paths: Sequence[str | Path], *, guide: bool = False, topology: str | None = None,
           timestep_fs: float | None = None, n_constraints: int | None = None,
           temperature_K: float | None = None, ensemble: str | None = None, session: str | Path | None = None,
           smoke_test: bool = False, smoke_timeout_s: float = 60.0, settings: object | None = None,
           units_style: str | None = None) -> int:
    """Open the window on one run made of ``paths`` (or a saved session) and run until it closes.

    Parameters
    ----------
    paths : files of one run (trajectory, topology, energy tables), or several H5MD/HDF5 files, each a
        run of its own (replicas); may be empty
    guide : show a short guide to the window's parts (dismissible)
    topology, timestep_fs, n_constraints, temperature_K, ensemble, units_style : what the files do not say (they become the
        run's settings, shown and changeable under the Runs list)
    session : a session file saved from the window (``.pwsession``) to restore instead
    smoke_test : open the window (offscreen is fine), wait until the first panel is drawn or an error
        is shown, give the other panels the rest of ``smoke_timeout_s`` seconds, write one line
        ("smoke test: window opened, N panels drawn") to stdout and return 0; return 1 (with one line
        on stderr) when no panel was drawn in time or an error was shown. Leaves the user's settings
        (first-run flag) alone.
    settings : a ``QtCore.QSettings`` to use instead of the user's (tests)

    Returns
    -------
    int
        The Qt event loop's exit code (0 when the window was closed normally).
    """
    import pyqtgraph as pg
    from PySide6 import QtCore, QtWidgets

    from phasewake.app.window.main import MainWindow, delete_now
    from phasewake.app.window.model import RunSettings

    pg.setConfigOptions(antialias=True, background="w", foreground="k")
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication(["phasewake"])
    QtCore.QCoreApplication.setOrganizationName("phasewake")
    QtCore.QCoreApplication.setApplicationName("phasewake")
    scratch = None
    if settings is None and smoke_test:  # never touch the user's settings (first-run flag, folders)
        import tempfile

        scratch = tempfile.TemporaryDirectory(prefix="phasewake-smoke-")
        settings = QtCore.QSettings(str(Path(scratch.name) / "settings.ini"), QtCore.QSettings.Format.IniFormat)
    win = MainWindow(settings=settings)  # type: ignore[arg-type]
    win.show()
    # The ~70,000 objects of Qt, pyqtgraph, numpy and the window made so far live as long as the window:
    # moved out of the collector's view, a full collection in the window thread with the sample run open
    # takes 10-15 ms instead of 65-73 ms (measured), so it no longer stalls a redraw.
    import gc

    gc.freeze()
    if session is not None:
        win.load_session(session)
    elif paths:
        settings = RunSettings(timestep_fs=timestep_fs, n_constraints=n_constraints, temperature_K=temperature_K,
                               ensemble=ensemble, units_style=units_style)
        win.open_runs([(group, topology, settings) for group in group_runs(paths)])
    if smoke_test:
        code = _smoke(app, win, smoke_timeout_s)
        delete_now(win)
        if scratch is not None:
            scratch.cleanup()
        return code
    first = win.first_start()  # remembered in QSettings: the guide shows itself once
    if guide or first:
        win.show_guide()
    code = int(app.exec())
    _drop_pending_quits(app)
    if not win.jobs.wait_all(5_000):
        # A cancelled analysis still inside a long numpy call: nothing is written (inputs are read
        # only), so leave now instead of letting Qt abort on a thread destroyed while running.
        import os
        import sys

        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    delete_now(win)  # a host program (or a test) that launches again starts with no dead window to tear down
    return code


def _drop_pending_quits(app: object) -> None:
    """Remove quit requests still queued after the event loop returned.

    Closing the last window and an explicit quit() each post a Quit event; the first ends the loop,
    a second one left in the queue would later set Qt's quit-now flag and end every following event
    loop at once (a host application or a test harness would stop processing events).
    """
    from PySide6 import QtCore

    QtCore.QCoreApplication.removePostedEvents(app, QtCore.QEvent.Type.Quit)  # type: ignore[arg-type]


def smoke_outcome(win: object) -> tuple[int, int, list[str]]:
    """Panels drawn, panels in total, and the problems shown so far (window messages, panel errors)."""
    panels = getattr(win, "panels", {})
    drawn = sum(1 for p in panels.values() if p.view.spec is not None)
    problems = list(getattr(win, "messages", []))
    problems += [f"{name} panel: {p.error}" for name, p in panels.items() if getattr(p, "error", None)]
    return drawn, len(panels), problems


def _smoke(app: object, win: object, timeout_s: float) -> int:
    """Run the event loop until the first panel is drawn (then until idle, within ``timeout_s``)."""
    import sys

    from PySide6 import QtCore, QtWidgets

    def quiet(mode: object, context: object, message: str) -> None:
        # the offscreen platform's notice that it cannot resize windows is not news for a smoke test
        if "propagateSizeHints" not in message:
            sys.stderr.write(message + "\n")

    previous = QtCore.qInstallMessageHandler(quiet)
    clock = QtCore.QElapsedTimer()
    clock.start()
    state = {"first_ms": -1.0}
    qapp = QtWidgets.QApplication.instance()

    def poll() -> None:
        drawn, _, problems = smoke_outcome(win)
        if problems:
            qapp.quit()
            return
        if drawn and state["first_ms"] < 0:
            state["first_ms"] = float(clock.elapsed())
        idle = not win.jobs.busy and not win._recompute_timer.isActive() and not win._rest_pending  # type: ignore[attr-defined]
        if (drawn and idle) or clock.elapsed() > timeout_s * 1000:
            qapp.quit()

    timer = QtCore.QTimer()
    timer.timeout.connect(poll)
    timer.start(50)
    qapp.exec()
    _drop_pending_quits(qapp)
    timer.stop()
    drawn, total, problems = smoke_outcome(win)
    win.jobs.cancel_all()  # type: ignore[attr-defined]
    finished = win.jobs.wait_all(30_000)  # type: ignore[attr-defined]
    win.close()  # type: ignore[attr-defined]
    qapp.processEvents()
    if previous is not None:  # someone else's handler (a test harness): give it back
        QtCore.qInstallMessageHandler(previous)
    if problems:
        sys.stderr.write(f"smoke test failed: {problems[0].splitlines()[0] if problems[0] else 'error shown'}\n")
        code = 1
    elif drawn == 0:
        sys.stderr.write(f"smoke test failed: no panel drawn within {timeout_s:.0f} s\n")
        code = 1
    else:
        first = state["first_ms"] / 1000.0
        rest = "" if drawn == total else f" of {total} (the others were still computing after {timeout_s:.0f} s)"
        sys.stdout.write(f"smoke test: window opened, {drawn} panels drawn{rest} "
                         f"(first after {first:.1f} s)\n")
        code = 0
    sys.stdout.flush()
    sys.stderr.flush()
    if not finished:
        import os

        os._exit(code)
    return code


__all__ = ["group_runs", "launch", "smoke_outcome"]
