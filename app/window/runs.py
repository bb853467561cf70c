"""The Runs list (left of the window): loaded runs, what each holds, add/remove, per-run settings.

Adding goes through a file dialog or drag and drop; the list only *asks* for files to be opened
(``addRequested``), the main window opens them in the background and adds them to the model.
"""

from __future__ import annotations

from pathlib import Path

from PySide6 import QtCore, QtWidgets

from phasewake.app.window.file_dialogs import TakesDroppedFiles
from phasewake.app.window.model import RunSettings, WindowModel
from phasewake.core.model.run import Run


def _file_temperature(run: Run) -> str:
    """The mean of the energy table's temperature column, in words ('' when there is none)."""
    import numpy as np

    if run.energies is None:
        return ""
    s = run.energies.by_role("temperature")
    if s is None:
        return ""
    v = np.asarray(s.values, float)
    v = v[np.isfinite(v)]
    return f"{v.mean():.4g} K (mean of the energy table's {s.name})" if v.size else ""


def _energy_terms(run: Run, most: int = 6) -> str:
    """The energy table's terms: all when few; else their number and those the analyses use (the total,
    kinetic, potential, conserved and temperature columns), the full list in the cell's tooltip."""
    if run.energies is None or not run.energies.series:
        return "none"
    series = [s for s in run.energies.series.values() if s.role not in ("time", "step")]
    names = [f"{s.name} ({s.unit})" if s.unit else s.name for s in series]
    if len(names) <= most:
        return ", ".join(names) or "none"
    order = ("total", "conserved", "potential", "kinetic", "temperature", "bath_heat", "pressure", "volume")
    ranked = sorted((order.index(s.role), n) for s, n in zip(series, names) if s.role in order)
    used = [n for _, n in ranked][:most]
    return f"{len(names)} terms" + (f", among them {', '.join(used)}" if used else "") + " (hover for all)"


def run_summary(run: Run, *, kinetic: str = "") -> list[tuple[str, str]]:
    """What a run holds, as (what, value) rows for the Runs list.

    kinetic : the kinetic temperature measured by the audit, in words, when it has run.
    """
    n_sites = int(run.virtual_sites.size)
    rows = [("atoms", f"{run.n_atoms}" + (f" ({n_sites} massless virtual sites)" if n_sites else ""))]
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
    md = run.metadata
    rows.append(("time step", "unknown" if md.timestep_ps is None else f"{md.timestep_ps * 1e3:.4g} fs"))
    rows.append(("ensemble", md.ensemble or "unknown"))
    if md.thermostat:
        rows.append(("thermostat", md.thermostat))
    src = md.sources.get("temperature_K", "")
    rows.append(("target temperature", "none stated" if md.temperature_K is None else
                 f"{md.temperature_K:.4g} K" + (" (yours)" if src == "user" else "")))
    rows.append(("kinetic temperature", kinetic or _file_temperature(run) or
                 ("being measured" if run.has_velocities else "unknown (no velocities, no temperature column)")))
    rows.append(("constraints", "unknown" if md.n_constraints is None else
                 f"{md.n_constraints}" + (f" ({md.constraints_source})" if md.constraints_source else "")))
    rows.append(("energy terms", _energy_terms(run)))
    if run.paths:
        rows.append(("files", ", ".join(Path(p).name for p in run.paths)))
    for w in run.warnings[:4]:
        rows.append(("warning", w))
    return rows


ENSEMBLES = (("", "as in files"), ("NVE", "NVE (no thermostat)"), ("NVT", "NVT (thermostat)"),
             ("NPT", "NPT (thermostat and barostat)"))
UNITS_STYLES = (("", "as in files"), ("real", "real (Å, fs, kcal/mol)"), ("metal", "metal (Å, ps, eV)"),
                ("lj", "lj (reduced)"), ("si", "si"), ("cgs", "cgs"), ("electron", "electron"), ("micro", "micro"),
                ("nano", "nano"))
UNITS_TIP = "The LAMMPS units style of a dump opened without its log.lammps (the log echoes it)"
THERMOSTATS = (("", "as in files"), ("none", "none"), ("langevin", "Langevin"), ("nose-hoover", "Nos\u00e9\u2013Hoover"),
               ("csvr", "stochastic velocity rescaling"), ("berendsen", "Berendsen"), ("andersen", "Andersen"))


def _stated_number(top: float, decimals: int, suffix: str) -> QtWidgets.QDoubleSpinBox:
    """A number a user may state, 0 to ``top``; 0 reads "as in files" (keep the files' value)."""
    box = QtWidgets.QDoubleSpinBox()
    box.setRange(0.0, top)
    box.setDecimals(decimals)
    box.setSuffix(suffix)
    box.setSpecialValueText("as in files")
    return box


class SettingsForm(QtWidgets.QGroupBox):
    """Time step, constraints, ensemble, thermostat and its temperature a user states for a run
    (blank: keep the files'). Apply sends them to the run's metadata and the panels recompute."""

    applied = QtCore.Signal(object)  # RunSettings

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__("Settings of the selected run", parent)
        self.timestep = _stated_number(100.0, 3, " fs")
        self.constraints = QtWidgets.QSpinBox()
        self.constraints.setRange(-1, 10_000_000)
        self.constraints.setSpecialValueText("as in files")
        self.temperature = _stated_number(100_000.0, 2, " K")
        self.ensemble = QtWidgets.QComboBox()
        for value, text in ENSEMBLES:
            self.ensemble.addItem(text, value)
        self.ensemble.setToolTip("How the run was made: NVE runs are judged on energy conservation, "
                                 "thermostatted runs on their temperature")
        self.thermostat = QtWidgets.QComboBox()
        for value, text in THERMOSTATS:
            self.thermostat.addItem(text, value)
        self.units = QtWidgets.QComboBox()
        for value, text in UNITS_STYLES:
            self.units.addItem(text, value)
        self.units.setToolTip(UNITS_TIP)
        for combo in (self.ensemble, self.thermostat, self.units):
            combo.setSizeAdjustPolicy(QtWidgets.QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(8)
        self.apply = QtWidgets.QPushButton("Apply")
        self.apply.setToolTip("Use these values for this run and recompute its panels")
        self.apply.clicked.connect(lambda: self.applied.emit(self.settings()))
        form = QtWidgets.QFormLayout(self)
        form.setRowWrapPolicy(QtWidgets.QFormLayout.RowWrapPolicy.WrapLongRows)
        form.addRow("Time step", self.timestep)
        form.addRow("Constraints", self.constraints)
        form.addRow("Ensemble", self.ensemble)
        form.addRow("Thermostat", self.thermostat)
        form.addRow("Target temperature", self.temperature)
        form.addRow("LAMMPS units", self.units)
        form.addRow(self.apply)

    def settings(self) -> RunSettings:
        return RunSettings(
            timestep_fs=self.timestep.value() or None,
            n_constraints=None if self.constraints.value() < 0 else self.constraints.value(),
            temperature_K=self.temperature.value() or None,
            ensemble=self.ensemble.currentData() or None,
            thermostat=self.thermostat.currentData() or None,
            units_style=self.units.currentData() or None,
        )

    def show_settings(self, s: RunSettings) -> None:
        self.timestep.setValue(s.timestep_fs or 0.0)
        self.constraints.setValue(-1 if s.n_constraints is None else s.n_constraints)
        self.temperature.setValue(s.temperature_K or 0.0)
        self.ensemble.setCurrentIndex(max(0, self.ensemble.findData(s.ensemble or "")))
        self.thermostat.setCurrentIndex(max(0, self.thermostat.findData(s.thermostat or "")))
        self.units.setCurrentIndex(max(0, self.units.findData(s.units_style or "")))


class RunsList(TakesDroppedFiles, QtWidgets.QWidget):
    """Signals: ``addRequested(list)`` of file paths (from the dialog or a drop)."""

    addRequested = QtCore.Signal(list)

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None, *,
                 settings: QtCore.QSettings | None = None, folder_key: str = "last_run_folder") -> None:
        super().__init__(parent)
        self.model = model
        self.app_settings = settings if settings is not None else QtCore.QSettings()
        self.folder_key = folder_key  # where the Open dialog starts: the folder a run was last opened from
        self._kinetic: dict[int, tuple[Run, str]] = {}  # id(run) -> (run, the audit's kinetic temperature)
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
        # details and settings scroll together, so a laptop-sized window (640 px high) reaches Apply
        lower = QtWidgets.QWidget()
        lower_lay = QtWidgets.QVBoxLayout(lower)
        lower_lay.setContentsMargins(0, 0, 0, 0)
        self.details.setMinimumHeight(160)
        lower_lay.addWidget(self.details, 1)
        lower_lay.addWidget(self.settings)
        scroll = QtWidgets.QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QtWidgets.QFrame.Shape.NoFrame)
        scroll.setHorizontalScrollBarPolicy(QtCore.Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        scroll.setWidget(lower)
        self.lower_scroll = scroll
        lay.addWidget(scroll, 3)
        self.list.setMinimumHeight(48)
        self.setMinimumWidth(170)
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
            item.setToolTip(f"{e.label}: {e.run.n_atoms} atoms, {n} frames\n" + ("\n".join(e.paths) or "built in memory"))
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

    def note_kinetic_temperature(self, run: Run, text: str) -> None:
        """The kinetic temperature the audit measured for ``run`` (shown in its details)."""
        self._kinetic[id(run)] = (run, text)
        if self.model.current is not None and self.model.current.run is run:
            self._show_details()

    def _show_details(self) -> None:
        e = self.model.current
        hit = None if e is None else self._kinetic.get(id(e.run))
        kinetic = hit[1] if hit is not None and e is not None and hit[0] is e.run else ""
        rows = [] if e is None else run_summary(e.run, kinetic=kinetic)
        self.details.setRowCount(len(rows))
        for r, (k, v) in enumerate(rows):
            self.details.setItem(r, 0, QtWidgets.QTableWidgetItem(k))
            cell = QtWidgets.QTableWidgetItem(v)
            if k == "energy terms" and e is not None and e.run.energies is not None:
                cell.setToolTip("\n".join(f"{s.name} ({s.unit})" if s.unit else s.name
                                           for s in e.run.energies.series.values()))
            else:
                cell.setToolTip(v)
            self.details.setItem(r, 1, cell)
        self.details.resizeColumnToContents(0)
        self.details.resizeRowsToContents()
        self.settings.setEnabled(e is not None)
        if e is not None:
            self.settings.show_settings(e.settings)
            # the units style is read from a LAMMPS dump's log: asked of other runs it would only confuse
            lammps = str(e.run.metadata.engine or "").startswith("LAMMPS") or e.settings.units_style is not None
            self.settings.units.setEnabled(lammps)
            self.settings.units.setToolTip(UNITS_TIP if lammps else "Only for LAMMPS dumps (this run is not one)")

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
        settings = self.app_settings
        folder = str(settings.value(self.folder_key, "") or "")
        from phasewake.core.readers import file_patterns

        # the suffixes every reader accepts, plus engine files named without one (log.lammps is *.lammps)
        patterns = " ".join(file_patterns())
        paths, _ = QtWidgets.QFileDialog.getOpenFileNames(
            self, "Open run files", folder, f"Run files ({patterns});;All files (*)")
        if paths:
            settings.setValue(self.folder_key, str(Path(paths[0]).parent))
            self.addRequested.emit(paths)

    def ask_for_folder(self) -> None:
        """A run folder: the engine's files in it are found as on the command line (core.readers.folder)."""
        settings = self.app_settings
        start = str(settings.value(self.folder_key, "") or "")
        folder = QtWidgets.QFileDialog.getExistingDirectory(self, "Open a run folder", start)
        if folder:
            settings.setValue(self.folder_key, str(Path(folder).parent))
            self.addRequested.emit([folder])

    # ---- drag and drop ------------------------------------------------------------------------
    def files_dropped(self, paths: list[str]) -> None:
        self.addRequested.emit(paths)

