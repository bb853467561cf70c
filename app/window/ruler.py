"""The time ruler: a strip under the panels with the whole run's time axis, the cursor and the
analysis window.

Drag the cursor line to move the shared cursor; drag the shaded window (or its edges) to restrict
every analysis to that stretch of time (for instance to drop equilibration). The ruler writes to
the shared model and follows it; the model only signals real changes, so there is no feedback loop.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.app.window.model import WindowModel
from phasewake.app.window.render import CURSOR_COLOUR, FONT_PT

WINDOW_COLOUR = (86, 180, 233, 60)  # Okabe-Ito sky blue, translucent


class TimeRuler(QtWidgets.QWidget):
    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.plot_widget = pg.PlotWidget(background="w")
        self.plot_widget.setMinimumHeight(70)
        self.plot_widget.setMaximumHeight(110)
        self.plot = self.plot_widget.getPlotItem()
        self.plot.hideAxis("left")
        self.plot.setMouseEnabled(x=False, y=False)
        self.plot.hideButtons()
        self.plot.setMenuEnabled(False)
        ax = self.plot.getAxis("bottom")
        ax.enableAutoSIPrefix(False)
        ax.setLabel(text="Time (ps)", **{"font-size": f"{FONT_PT}pt"})
        font = QtGui.QFont()
        font.setPointSize(FONT_PT)
        ax.setTickFont(font)
        ax.setTextPen(pg.mkPen("#000000"))
        self.overview = pg.PlotDataItem(pen=pg.mkPen("#777777", width=1))
        self.overview.setDownsampling(auto=True, method="peak")
        self.overview.setClipToView(True)
        self.plot.addItem(self.overview)
        self.region = pg.LinearRegionItem(brush=pg.mkBrush(*WINDOW_COLOUR),
                                          pen=pg.mkPen("#0072B2", width=2), swapMode="sort")
        self.region.setZValue(10)
        self.plot.addItem(self.region)
        self.cursor_line = pg.InfiniteLine(angle=90, movable=True, pen=pg.mkPen(CURSOR_COLOUR, width=2),
                                      hoverPen=pg.mkPen(CURSOR_COLOUR, width=4))
        self.cursor_line.setZValue(20)
        self.plot.addItem(self.cursor_line)
        self.label = QtWidgets.QLabel()
        self.label.setObjectName("rulerLabel")
        # the text changes with every cursor step: it must never set the window's width (a narrow window
        # cuts it; the tooltip holds it whole)
        self.label.setSizePolicy(QtWidgets.QSizePolicy.Policy.Ignored, QtWidgets.QSizePolicy.Policy.Preferred)
        self.label.setMinimumWidth(40)
        self.reset_button = QtWidgets.QPushButton("Whole run")
        self.reset_button.setToolTip("Analyse the whole run again (Ctrl+0)")
        self.reset_button.clicked.connect(lambda: self.model.set_time_window(None))
        top = QtWidgets.QHBoxLayout()
        title = QtWidgets.QLabel("<b>Time ruler</b>")
        top.addWidget(title)
        top.addSpacing(12)
        top.addWidget(self.label, 1)
        top.addWidget(self.reset_button)
        lay = QtWidgets.QVBoxLayout(self)
        lay.setContentsMargins(4, 0, 4, 2)
        lay.setSpacing(0)
        lay.addLayout(top)
        lay.addWidget(self.plot_widget)
        self._updating = False
        self.cursor_line.sigPositionChanged.connect(self._cursor_dragged)
        self.region.sigRegionChangeFinished.connect(self._region_dragged)
        model.currentRunChanged.connect(self._run_changed)
        model.cursorChanged.connect(self._follow_cursor)
        model.timeWindowChanged.connect(self._follow_window)
        self._run_changed(model.current_index)

    def _run_changed(self, index: int) -> None:
        t = self.model.time_ps
        self._updating = True
        try:
            if t.size == 0:
                self.overview.setData([], [])
                self.region.hide()
                self.cursor_line.hide()
                self.label.setText("no run open")
                return
            self.region.show()
            self.cursor_line.show()
            y = self._overview_values(t)
            self.overview.setData(t, y)
            lo, hi = float(t[0]), float(t[-1])
            if hi <= lo:
                hi = lo + 1.0
            self.plot.setXRange(lo, hi, padding=0.01)
            self.region.setBounds((lo, hi))
            self.cursor_line.setBounds((lo, hi))
        finally:
            self._updating = False
        self._follow_window()
        self._follow_cursor(self.model.cursor_frame)

    def _overview_values(self, t: np.ndarray) -> np.ndarray:
        """A faint trace of the total (or potential) energy behind the ruler, else zeros."""
        e = self.model.current
        table = None if e is None else e.run.energies
        if table is not None and len(table) == t.size:
            for role in ("total", "conserved", "potential", "temperature"):
                s = table.by_role(role)
                if s is not None:
                    v = np.asarray(s.values, float)
                    if np.isfinite(v).any():
                        return v
        return np.zeros(t.size)

    def _follow_cursor(self, frame: int) -> None:
        if self.model.time_ps.size == 0:
            return
        self._updating = True
        try:
            self.cursor_line.setValue(self.model.cursor_time_ps)
        finally:
            self._updating = False
        self._update_label()

    def _follow_window(self) -> None:
        if self.model.time_ps.size == 0:
            return
        lo, hi = self.model.effective_window_ps
        self._updating = True
        try:
            self.region.setRegion((lo, hi))
        finally:
            self._updating = False
        self._update_label()

    def _update_label(self) -> None:
        lo, hi = self.model.effective_window_ps
        start, stop = self.model.window_frames()
        whole = self.model.time_window_ps is None
        text = (f"cursor {self.model.cursor_time_ps:.4g} ps (frame {self.model.cursor_frame}) \u2014 "
                f"analysis window {lo:.4g}\u2013{hi:.4g} ps, frames {start}\u2013{stop - 1}"
                + (" (whole run)" if whole else "") + " \u2014 drag the shaded band to change it")
        self.label.setText(text)
        self.label.setToolTip(text)

    def _cursor_dragged(self, line: pg.InfiniteLine) -> None:
        if not self._updating:
            self.model.set_cursor_time(float(line.value()))

    def _region_dragged(self, region: pg.LinearRegionItem) -> None:
        if not self._updating:
            lo, hi = region.getRegion()
            self.model.set_time_window((float(lo), float(hi)))

    def sizeHint(self) -> QtCore.QSize:  # noqa: N802 - Qt override
        return QtCore.QSize(800, 110)
