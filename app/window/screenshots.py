"""Render every panel of the sample run to PNG at a fixed size, offscreen.

    python -m phasewake.app.window.screenshots --output DIR [--size 1400x900] [FILE ...]

Writes ``DIR/<run>/<n>-<panel>.png`` (the whole window with that panel on top) for each panel, so
anyone can look at the window without a display (``make screenshots SIZE=1024x640``). Each FILE is a
run of its own; with no FILE, the bundled sample runs ``dimer_nve.h5md`` and ``dimer_langevin.h5md``
are used. Exit code 2 (one line) when a run cannot be found or opened.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path

DEFAULT_SIZE = (1400, 900)
SAMPLE_RUNS = ("dimer_nve.h5md", "dimer_langevin.h5md")


def sample_run_path(name: str = "dimer_nve.h5md") -> Path | None:
    """The bundled sample run: sample_data/ of a clone, or the installed phasewake.sample_data."""
    try:
        import phasewake.sample_data as pkg

        for folder in getattr(pkg, "__path__", []):
            p = Path(folder) / name
            if p.exists():
                return p
    except ImportError:
        pass
    p = Path(__file__).resolve().parents[2] / "sample_data" / name
    return p if p.exists() else None


def _slug(name: str) -> str:
    return name.lower().replace(" ", "-")


def render(paths: Sequence[str], output: Path, *, size: tuple[int, int] = DEFAULT_SIZE,
           timeout_s: float = 180.0) -> list[Path]:
    """Open ``paths`` in a window of ``size`` pixels, wait for every panel, save one PNG per panel."""
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    import pyqtgraph as pg
    from PySide6 import QtCore, QtWidgets

    from phasewake.app.window.analyses import PANELS
    from phasewake.app.window.main import MainWindow, delete_now

    pg.setConfigOptions(antialias=True)
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication(["phasewake-screenshots"])
    output.mkdir(parents=True, exist_ok=True)
    settings = QtCore.QSettings(str(output / ".screenshots-settings.ini"), QtCore.QSettings.Format.IniFormat)
    win = MainWindow(settings=settings)
    win.resize(*size)
    win.show()
    win.open_paths(list(paths))
    if not win.wait_idle(int(timeout_s * 1000)):
        raise TimeoutError(f"the panels were not ready after {timeout_s:.0f} s")
    if win.messages:
        raise RuntimeError(win.messages[-1])
    t = win.model.time_ps
    if t.size:
        win.model.set_cursor_frame(t.size // 3)  # a cursor away from the edges, so it can be seen
    # a crossing selected, so the Crossings and Phase space panels show the linked highlight
    cross = win.panels["Crossings"]
    if cross.visible_events():
        cross.select_event(min(2, len(cross.visible_events()) - 1))
    written = []
    for i, name in enumerate(PANELS):
        win.tabs.setCurrentIndex(i)
        for _ in range(3):
            app.processEvents()
        path = output / f"{i + 1}-{_slug(name)}.png"
        if not win.grab().save(str(path)):
            raise OSError(f"could not write {path}")
        written.append(path)
        # every other figure the panel's Show box offers (VACF, spectra, blocking, dwell times, ...)
        panel = win.panels[name]
        first = panel.chooser.currentIndex()
        for k in range(panel.chooser.count()):
            if k == first:
                continue
            panel.chooser.setCurrentIndex(k)
            for _ in range(3):
                app.processEvents()
            key = str(panel.chooser.itemData(k) or k).replace(".", "-")
            extra = output / f"{i + 1}-{_slug(name)}-{key}.png"
            win.grab().save(str(extra))
            written.append(extra)
        if panel.chooser.count():
            panel.chooser.setCurrentIndex(max(first, 0))
    # an explanation side note open, as after clicking a verdict's title
    energy = win.panels["Energy"]
    win.tabs.setCurrentWidget(energy)
    kinds = [k for k, _ in energy.notes.anchors()]
    if kinds:
        energy.side_note.explain(kinds[0])
        for _ in range(3):
            app.processEvents()
        path = output / f"{len(PANELS) + 1}-explanation.png"
        win.grab().save(str(path))
        written.append(path)
        energy.side_note.hide()
    first = []
    for name, show in (("guide", win.show_guide), ("user-guide", win.show_user_guide), ("about", win._about)):
        dlg = show()
        app.processEvents()
        gpath = output / f"0-{name}.png"
        dlg.grab().save(str(gpath))
        first.append(gpath)
        dlg.close()
    written[:0] = first
    delete_now(win)  # the next run's window starts without this one's plots to tear down
    return written


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m phasewake.app.window.screenshots",
                                     description="Render every panel of a run to PNG (offscreen).")
    parser.add_argument("files", nargs="*", metavar="FILE", help="run files (default: the bundled sample run)")
    parser.add_argument("--output", "-o", default="screenshots", help="folder for the PNG files")
    parser.add_argument("--size", default=f"{DEFAULT_SIZE[0]}x{DEFAULT_SIZE[1]}",
                        help="window size in pixels, WIDTHxHEIGHT")
    args = parser.parse_args(argv)
    try:
        w, h = (int(v) for v in args.size.lower().split("x"))
    except ValueError:
        sys.stderr.write(f"screenshots: --size must look like 1400x900, not {args.size!r}\n")
        return 2
    files = list(args.files)
    if not files:
        samples = [sample_run_path(n) for n in SAMPLE_RUNS]
        if any(s is None for s in samples):
            sys.stderr.write("screenshots: the sample runs (sample_data/dimer_nve.h5md, dimer_langevin.h5md) are "
                             "not there; run `make samples` or give FILE\n")
            return 2
        files = [str(s) for s in samples]
    from phasewake.core.errors import PhasewakeError

    written = []
    try:
        for f in files:
            written += render([f], Path(args.output) / Path(f).stem, size=(w, h))
    except (PhasewakeError, OSError, RuntimeError, TimeoutError) as exc:
        sys.stderr.write(f"screenshots: {exc}\n")
        return 2
    for p in written:
        sys.stdout.write(f"{p}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
