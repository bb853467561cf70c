"""The Runs list (left of the window): loaded runs, what each holds, add/remove, per-run settings.

Adding goes through a file dialog or drag and drop; the list only *asks* for files to be opened
(``addRequested``), the main window opens them in the background and adds them to the model.
"""

from __future__ import annotations

from pathlib import Path

from PySide6 import QtCore, QtWidgets

from phasewake.app.window.model import RunSettings, WindowModel
from phasewake.core.run import Run


def run_summary(run: Run) -> list[tuple[str, str]]:
    """What a run holds, as (what, value) rows for the Runs list."""
    rows = [("atoms", f"{run.n_atoms}")]
    t = run.time_ps
    rows.append(("frames", f"{run.n_frames}"))
    if t.size:
        rows.append(("span", f"{float(t[0]):.4g}\u2013{float(t[-1]):.4g} ps"))
    dt = run.frame_spacing_ps
    if dt is not None:
        rows.append(("frame spacing", f"{dt:.4g} ps"))
    if run.frames is None:
        vel = "no frames"
    elif run.frames.has_velocities:
        vel = "estimated from positions" if run.frames.velocities_estimated else "stored"
    else:
        vel = "none"
    rows.append(("velocities", vel))
    if run.energies is not None and run.energies.series:
        terms = [f"{s.name} ({s.unit})" if s.unit else s.name for s in run.energies.series.values()
                 if s.role not in ("time", "step")]
        rows.append(("energy terms", ", ".join(terms) if terms else "none"))
    else:
        rows.append(("energy terms", "none"))
    md = run.metadata
    rows.append(("time step", "unknown" if md.timestep_ps is None else f"{md.timestep_ps * 1e3:.4g} fs"))
    rows.append(("ensemble", md.ensemble or "unknown"))
    if md.thermostat:
        rows.append(("thermostat", md.thermostat))
    rows.append(("temperature", "unknown" if md.temperature_K is None else f"{md.temperature_K:.4g} K"))
    rows.append(("constraints", "unknown" if md.n_constraints is None else
                 f"{md.n_constraints}" + (f" ({md.constraints_source})" if md.constraints_source else "")))
    if run.paths:
        rows.append(("files", ", ".join(Path(p).name for p in run.paths)))
    for w in run.warnings[:4]:
        rows.append(("warning", w))
    return rows


class SettingsForm(QtWidgets.QGroupBox):
    """Time step, constraints and temperature a user states for a run (blank: keep the files')."""

    applied = QtCore.Signal(object)  # RunSettings

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__("Settings of the selected run", parent)
        self.timestep = QtWidgets.QDoubleSpinBox()
        self.timestep.setRange(0.0, 100.0)
        self.timestep.setDecimals(3)
        self.timestep.setSuffix(" fs")
        self.timestep.setSpecialValueText("as in files")
        self.constraints = QtWidgets.QSpinBox()
        self.constraints.setRange(-1, 10_000_000)
        self.constraints.setSpecialValueText("as in files")
        self.temperature = QtWidgets.QDoubleSpinBox()
        self.temperature.setRange(0.0, 100_000.0)
        self.temperature.setDecimals(2)
        self.temperature.setSuffix(" K")
        self.temperature.setSpecialValueText("as in files")
        self.apply = QtWidgets.QPushButton("Apply")
        self.apply.setToolTip("Use these values for this run and recompute its panels")
        self.apply.clicked.connect(lambda: self.applied.emit(self.settings()))
        form = QtWidgets.QFormLayout(self)
        form.addRow("Integration time step", self.timestep)
        form.addRow("Constraints", self.constraints)
        form.addRow("Thermostat temperature", self.temperature)
        form.addRow(self.apply)

    def settings(self) -> RunSettings:
        return RunSettings(
            timestep_fs=self.timestep.value() or None,
            n_constraints=None if self.constraints.value() < 0 else self.constraints.value(),
            temperature_K=self.temperature.value() or None,
        )

    def show_settings(self, s: RunSettings) -> None:
        self.timestep.setValue(s.timestep_fs or 0.0)
        self.constraints.setValue(-1 if s.n_constraints is None else s.n_constraints)
        self.temperature.setValue(s.temperature_K or 0.0)


class RunsList(QtWidgets.QWidget):
    """Signals: ``addRequested(list)`` of file paths (from the dialog or a drop)."""

    addRequested = QtCore.Signal(list)

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.setAcceptDrops(True)
        self.list = QtWidgets.QListWidget()
        self.list.setToolTip("Loaded runs; the selected one is shown in the panels. Drop files here to add.")
        self.list.currentRowChanged.connect(self._row_changed)
        self.add_button = QtWidgets.QPushButton("Add\u2026")
        self.add_button.setToolTip("Open run files (Ctrl+O)")
        self.add_button.clicked.connect(self.ask_for_files)
        self.remove_button = QtWidgets.QPushButton("Remove")
        self.remove_button.setToolTip("Close the selected run (Ctrl+W)")
        self.remove_button.clicked.connect(self.remove_selected)
        self.details = QtWidgets.QTableWidget(0, 2)
        self.details.setHorizontalHeaderLabels(["holds", "value"])
        self.details.verticalHeader().hide()
        self.details.horizontalHeader().setStretchLastSection(True)
        self.details.setEditTriggers(QtWidgets.QAbstractItemView.EditTrigger.NoEditTriggers)
        self.details.setWordWrap(True)
        self.settings = SettingsForm()
        self.settings.applied.connect(self._apply_settings)
        buttons = QtWidgets.QHBoxLayout()
        buttons.addWidget(self.add_button)
        buttons.addWidget(self.remove_button)
        lay = QtWidgets.QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addWidget(self.list, 1)
        lay.addLayout(buttons)
        lay.addWidget(self.details, 3)
        lay.addWidget(self.settings)
        model.runsChanged.connect(self.refresh)
        model.currentRunChanged.connect(self._current_changed)
        self.refresh()

    # ---- view of the model --------------------------------------------------------------------
    def refresh(self) -> None:
        self.list.blockSignals(True)
        self.list.clear()
        for e in self.model.entries:
            n = e.run.n_frames
            item = QtWidgets.QListWidgetItem(f"{e.label}  \u2014  {e.run.n_atoms} atoms, {n} frames")
            item.setToolTip("\n".join(e.paths) or "built in memory")
            self.list.addItem(item)
        self.list.setCurrentRow(self.model.current_index)
        self.list.blockSignals(False)
        self._show_details()

    def _current_changed(self, index: int) -> None:
        if self.list.currentRow() != index:
            self.list.blockSignals(True)
            self.list.setCurrentRow(index)
            self.list.blockSignals(False)
        self._show_details()

    def _show_details(self) -> None:
        e = self.model.current
        rows = [] if e is None else run_summary(e.run)
        self.details.setRowCount(len(rows))
        for r, (k, v) in enumerate(rows):
            self.details.setItem(r, 0, QtWidgets.QTableWidgetItem(k))
            self.details.setItem(r, 1, QtWidgets.QTableWidgetItem(v))
        self.details.resizeColumnToContents(0)
        self.details.resizeRowsToContents()
        self.settings.setEnabled(e is not None)
        if e is not None:
            self.settings.show_settings(e.settings)

    # ---- user intent --------------------------------------------------------------------------
    def _row_changed(self, row: int) -> None:
        if row >= 0:
            self.model.set_current(row)

    def _apply_settings(self, s: RunSettings) -> None:
        if self.model.current_index >= 0:
            self.model.update_settings(self.model.current_index, s)

    def remove_selected(self) -> None:
        row = self.list.currentRow()
        if row >= 0:
            self.model.remove_run(row)

    def ask_for_files(self) -> None:
        settings = QtCore.QSettings()
        folder = str(settings.value("last_folder", ""))
        paths, _ = QtWidgets.QFileDialog.getOpenFileNames(
            self, "Open run files", folder,
            "Run files (*.h5md *.h5 *.hdf5 *.dcd *.xtc *.trr *.nc *.pdb *.gro *.csv *.tsv *.txt *.dat "
            "*.xvg *.prmtop *.parm7 *.psf *.lammpstrj *.xyz);;All files (*)")
        if paths:
            settings.setValue("last_folder", str(Path(paths[0]).parent))
            self.addRequested.emit(paths)

    # ---- drag and drop ------------------------------------------------------------------------
    def dragEnterEvent(self, event):  # noqa: N802 - Qt override
        if event.mimeData().hasUrls():
            event.acceptProposedAction()

    def dropEvent(self, event):  # noqa: N802 - Qt override
        paths = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        if paths:
            self.addRequested.emit(paths)
            event.acceptProposedAction()

