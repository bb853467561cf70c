"""Exports: the figure on screen (PNG, SVG, PDF), its data (CSV) and the run's report, written in the
background through ``phasewake.core.figures`` (matplotlib), one at a time.

A part of :class:`~phasewake.app.window.main.MainWindow`.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from functools import partial
from pathlib import Path
from typing import Any

from PySide6 import QtWidgets

from phasewake.app.window.analyses import dragged_states, window_run
from phasewake.app.window.file_dialogs import ask_path
from phasewake.app.window.panels import Panel
from phasewake.app.window.workers import JobOutcome
from phasewake.core.progress import Progress

# matplotlib is not thread-safe (its font caches broke a PDF report written while a figure was being
# exported: "bytes must be in range(0, 256)"): exports run in the background, one after another
EXPORT_LOCK = threading.Lock()


class ExportActions:
    """Export the figure, its data or the report (part of MainWindow)."""

    def current_panel(self) -> Panel:
        return self.tabs.currentWidget()  # type: ignore[return-value]

    def _provenance(self) -> dict[str, Any]:
        e = self.model.current
        prov: dict[str, Any] = {"time_window_ps": list(self.model.effective_window_ps),
                                "coordinate": self.model.coordinate}
        if e is not None:
            from phasewake.core.figures.export import provenance_of_run

            try:
                prov.update(provenance_of_run(e.run, settings={"time_window_ps": list(self.model.effective_window_ps),
                                                                "coordinate": self.model.coordinate}))
            except OSError:  # an input gone since it was opened: the figure is still worth writing
                pass
        return prov

    def export_figure_to(self, path: str | Path, *, preset: str = "slide", dpi: float = 200.0) -> Path:
        """Export the figure of the panel on top through core.export (matplotlib), as a background job.

        Returns the path at once; the status line says when the file is written (``wait_idle`` waits).
        """
        from phasewake.core.figures.export import export_figure

        return self._export_current(path, "Figure", lambda spec, target, provenance: export_figure(
            spec, target, preset=preset, dpi=dpi, provenance=provenance).path)

    def export_data_to(self, path: str | Path) -> Path:
        """The data of the figure on top as CSV, as a background job (returns the path at once)."""
        from phasewake.core.figures.export import export_csv

        return self._export_current(path, "Data", lambda spec, target, provenance: export_csv(
            spec, target, provenance=provenance))

    def _export_current(self, path: str | Path, what: str, write: Callable[[Any, Path, dict[str, Any]], Any]) -> Path:
        """``write(spec, target, provenance)`` of the figure on top, as a background job; the path at once."""
        from phasewake.core.errors import MissingDataError

        spec = self.current_panel().current_figure()
        if spec is None:
            raise MissingDataError("the panel on top has no figure to export yet")
        target = Path(path)
        provenance = self._provenance()

        def job():
            yield Progress(0, None, f"writing {target.name}")
            return write(spec, target, provenance)

        self._start_export(target, job, what)
        return target

    def _start_export(self, target: Path, job: Callable[[], Any], what: str) -> None:
        """Run an export as a background job; exports take turns (see EXPORT_LOCK)."""
        self._export_counter += 1
        key = f"export:{self._export_counter}"

        def one_at_a_time():
            yield Progress(0, None, f"waiting to write {target.name}")
            with EXPORT_LOCK:
                work = job()
                if hasattr(work, "send") and hasattr(work, "throw"):
                    return (yield from work)
                return work

        self.jobs.start(key, one_at_a_time, label=f"{what} export",
                        on_done=partial(self._export_finished, target, what))

    def ask_export_figure(self) -> None:
        from phasewake.core.errors import PhasewakeError

        if self.current_panel().current_figure() is None:
            self.show_problem("Nothing to export", "The panel on top has no figure yet.")
            return
        dlg = ExportDialog(self)
        if dlg.exec() != QtWidgets.QDialog.DialogCode.Accepted:
            return
        fmt, preset, dpi = dlg.values()
        name = (self.current_panel().current_figure().key or "figure").replace(".", "-")  # type: ignore[union-attr]
        path = ask_path(self, self.settings, "Export figure", f"{fmt.upper()} (*.{fmt})", save=True,
                        suggested=f"{name}.{fmt}")
        if not path:
            return
        if not Path(path).suffix:
            path += f".{fmt}"
        try:
            self.export_figure_to(path, preset=preset, dpi=dpi)
        except (OSError, PhasewakeError) as exc:
            self.show_problem("Could not export the figure", str(exc))

    def ask_export_data(self) -> None:
        from phasewake.core.errors import PhasewakeError

        spec = self.current_panel().current_figure()
        if spec is None:
            self.show_problem("Nothing to export", "The panel on top has no figure yet.")
            return
        path = ask_path(self, self.settings, "Export data", "CSV (*.csv)", save=True,
                        suggested=f"{spec.key.replace('.', '-')}.csv")
        if not path:
            return
        try:
            self.export_data_to(path)
        except (OSError, PhasewakeError) as exc:
            self.show_problem("Could not export the data", str(exc))

    def export_report_to(self, path: str | Path) -> None:
        """Build the report of the current run (restricted to the time window) in the background.

        A ``.html`` path writes the HTML report and the PDF beside it (core.figures.report writes both).
        """
        from phasewake.core.figures.report import build_report

        e = self.model.current
        if e is None:
            self.show_problem("No run", "Open a run before exporting its report.")
            return
        target = Path(path)
        pdf, html_path = (target.with_suffix(".pdf"), target) if target.suffix.lower() in (".html", ".htm") \
            else (target, None)
        start, stop = self.model.window_frames()
        run = window_run(e.run, start, stop)
        states, surface = dragged_states(self.model.choices)
        coordinate = self.model.coordinate or None

        def job():
            return build_report(run, pdf, coordinate=coordinate, states=states, surface=surface, html_path=html_path)

        self._start_export(target, job, "Report")

    def ask_export_report(self) -> None:
        path = ask_path(self, self.settings, "Export report", "PDF (*.pdf);;HTML (*.html)", save=True,
                        suggested="run-report.pdf")
        if path:
            self.export_report_to(path)

    def _export_finished(self, target: Path, what: str, outcome: JobOutcome) -> None:
        noun = {"Figure": "the figure", "Data": "the data", "Report": "the report"}.get(what, "the file")
        if outcome.error:
            self.show_problem(f"Could not write {noun}", outcome.error)
        elif outcome.cancelled:
            self.say(f"Writing {noun} was cancelled; {Path(target).name} was left as it was.")
        else:
            self.say(f"{what} written to {target}.")


class ExportDialog(QtWidgets.QDialog):
    """Format, size preset and DPI of an exported figure."""

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Export figure")
        self.fmt = QtWidgets.QComboBox()
        for f, what in (("png", "PNG image"), ("svg", "SVG vector"), ("pdf", "PDF vector")):
            self.fmt.addItem(what, f)
        self.preset = QtWidgets.QComboBox()
        for p, what in (("slide", "slide, 16:9"), ("single", "one journal column, ~8.5 cm"),
                        ("double", "two journal columns, ~17 cm")):
            self.preset.addItem(what, p)
        self.dpi = QtWidgets.QSpinBox()
        self.dpi.setRange(50, 1200)
        self.dpi.setValue(200)
        self.dpi.setSuffix(" dpi")
        buttons = QtWidgets.QDialogButtonBox(
            QtWidgets.QDialogButtonBox.StandardButton.Ok | QtWidgets.QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        form = QtWidgets.QFormLayout(self)
        form.addRow("Format", self.fmt)
        form.addRow("Size", self.preset)
        form.addRow("Resolution (PNG)", self.dpi)
        form.addRow(buttons)

    def values(self) -> tuple[str, str, float]:
        return str(self.fmt.currentData()), str(self.preset.currentData()), float(self.dpi.value())
